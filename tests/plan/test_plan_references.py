"""The plan's power, MDE and variances against published formulas and statsmodels."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import norm
from statsmodels.stats.power import NormalIndPower

from spillgauge.market.build import build_market
from spillgauge.plan import plan_study
from spillgauge.plan.summary import mde_multiplier
from tests.conftest import make_scenario

B, K, L, N = 3.0, 1.0, 0.05, 8000  # orders per week, Gamma shape, lift, users


def _no_interference(reps: int, **design):
    # Ample stock (cover 1000), no graph, no rhythm or shocks, no pool spread: every
    # user's orders over d days are Poisson(lambda_i d / 7), lambda_i ~ Gamma(K, mean B).
    return make_scenario(
        users={"count": N, "orders_per_week": B, "rate_shape": K, "history_days": 0},
        pools={"count": 4, "stock_cover": 1000.0}, calendar={"days": 28},
        graph={"model": "none"}, effect={"lift": L},
        design=[{"kind": "user", **design}], study={"reps": reps, "seed": 21})


def _closed_form_se(days: int) -> float:
    # Gamma-Poisson population (REFERENCES section 12, [CALC]): orders over d days have mean
    # mu = B d / 7 and variance mu + mu^2 / K; the difference in means of n/2 users per arm
    # has SE sqrt(var_c / n_c + var_t / n_t), mu_t = (1 + L) mu_c.
    mu_c = B * days / 7
    mu_t = (1 + L) * mu_c
    return math.sqrt((mu_c + mu_c**2 / K) / (N / 2) + (mu_t + mu_t**2 / K) / (N / 2))


def _closed_form_power(days: int, alpha: float = 0.05) -> float:
    delta = L * B * days / 7
    z = norm.ppf(1 - alpha / 2)
    lam = delta / _closed_form_se(days)
    return norm.cdf(lam - z) + norm.cdf(-lam - z)


def test_worked_value_and_statsmodels_agree_with_the_closed_form():
    # REFERENCES section 12 worked value: k = 1, b = 3, d = 14, 1000 per arm, L = 0.1 gives
    # SE 0.3036, MDE(80%) 0.8505, power 0.507 (Bloom 1995 multiplier z_.975 + z_.8 = 2.801585).
    mu_c, mu_t = 6.0, 6.6
    se = math.sqrt((mu_c + mu_c**2) / 1000 + (mu_t + mu_t**2) / 1000)
    assert se == pytest.approx(0.3036, abs=5e-5)
    assert mde_multiplier(0.05, 0.8) * se == pytest.approx(0.8505, abs=5e-4)
    # statsmodels NormalIndPower: effect size = delta / pooled SD, nobs1 per arm, ratio 1.
    pooled_sd = math.sqrt((mu_c + mu_c**2 + mu_t + mu_t**2) / 2)
    power = NormalIndPower().power(0.6 / pooled_sd, nobs1=1000, alpha=0.05, ratio=1.0)
    assert power == pytest.approx(0.507, abs=5e-4)
    for days in (7, 14, 28):
        mu_c = B * days / 7
        mu_t = (1 + L) * mu_c
        pooled_sd = math.sqrt((mu_c + mu_c**2 / K + mu_t + mu_t**2 / K) / 2)
        reference = NormalIndPower().power(L * mu_c / pooled_sd, nobs1=N / 2, alpha=0.05)
        assert _closed_form_power(days) == pytest.approx(reference, rel=1e-9)


def test_user_level_se_and_mde_match_the_gamma_poisson_closed_form():
    # The rates are drawn once per market, so the realised population's variance of
    # lambda d / 7 deviates from mu^2 / K by a relative sqrt((kurtosis - 1) / n) =
    # sqrt(8 / N) for Gamma(1) (kurtosis 9): 3.2% of that term, at most 1.6% of the SE.
    # Four of those standard errors: 6.3% (the Monte Carlo error of the mean SE over the
    # replications is far smaller).
    plan = plan_study(_no_interference(reps=12), days=(7, 14, 28))
    tolerance = 4 * 0.5 * math.sqrt(8 / N)
    for row in plan.rows:
        expected = _closed_form_se(row["days"])
        assert row["mean_se"] == pytest.approx(expected, rel=tolerance), row["days"]
        # MDE = (t critical + z of the power) x SE (Bloom 1995); with thousands of users
        # the t critical value is the normal one to 4 digits.
        assert row["mde"] == pytest.approx(2.801585 * expected, rel=tolerance + 1e-3)
        assert row["mde_relative"] == pytest.approx(row["mde"] / row["control_mean"])
        assert row["trusted"]


@pytest.mark.slow
def test_user_level_power_matches_statsmodels_within_monte_carlo_error():
    # Rejection rate over 400 replications against NormalIndPower's power at the same
    # effect size (and the closed form): within 4 binomial SEs.
    reps = 400
    plan = plan_study(_no_interference(reps=reps), days=(7, 14, 28))
    for row in plan.rows:
        expected = _closed_form_power(row["days"])
        band = 4 * math.sqrt(expected * (1 - expected) / reps)
        assert abs(row["power"] - expected) <= band, (row["days"], row["power"], expected)


def test_cluster_variance_inflation_matches_the_design_effect():
    # Design effect 1 + (m - 1) ICC for clusters of m users without interference
    # (Kish 1965, Survey Sampling; Donner & Klar 2000). The ICC comes from the scenario's
    # pool demand spread as the market realised it (its pool multipliers are drawn once
    # per market): between-pool variance of the users' expected orders over the total
    # variance (expected orders' variance plus the Poisson variance, their mean).
    days = 14
    scenario = make_scenario(
        users={"count": 8000, "orders_per_week": 2.0, "rate_shape": 2.0, "history_days": 0},
        pools={"count": 80, "stock_cover": 1000.0, "demand_spread": 0.3},
        calendar={"days": days}, graph={"model": "none"}, effect={"lift": 0.0},
        design=[{"kind": "user"}, {"kind": "cluster", "clusters": "pools"}],
        study={"reps": 30, "seed": 8})
    market = build_market(scenario, 8)
    expected_orders = market.population.rate_per_hour * days * 24
    pools = market.population.pool_of_user
    sizes = np.bincount(pools)
    pool_means = np.bincount(pools, weights=expected_orders) / sizes
    between = np.average((pool_means - expected_orders.mean()) ** 2, weights=sizes)
    total = expected_orders.var() + expected_orders.mean()
    icc = between / total
    m = sizes.mean()
    design_effect = 1 + (m - 1) * icc
    plan = plan_study(scenario, days=(days,))
    rows = {r["label"]: r for r in plan.rows}
    measured = (rows["cluster-pools"]["mean_se"] / rows["user"]["mean_se"]) ** 2
    # Tolerance: the cluster-robust variance from 80 clusters has a relative SD of about
    # sqrt(2 / 79) = 16% per replication, 2.9% as the mean over 30; four of those, 12%.
    # (Unequal pool sizes change Kish's factor by (1 + CV^2) of the sizes, CV about 0.1
    # here: 1%, inside the band.)
    assert measured == pytest.approx(design_effect, rel=0.12)
    assert design_effect > 1.5  # the check has teeth: clusters cost real precision here
    # Effective sample size: users over the design effect (Kish 1965).
    assert rows["cluster-pools"]["effective_n"] == pytest.approx(8000 / measured, rel=1e-9)


@pytest.mark.parametrize("outcome", ["orders", "revenue", "conversion"])
def test_cuped_variance_reduction_matches_one_minus_rho_squared(outcome):
    # Regression adjustment on the pre-period keeps 1 - rho^2 of the variance of the
    # difference in means (Deng, Xu, Kohavi & Walker 2013, WSDM), rho the correlation of
    # the outcome's pre-period analogue (the covariate the estimator adjusts for) and the
    # outcome; the plan measures rho in the all-control world. The lift (5%) changes the
    # treated arm's variance by about 2L = 10% of half the total, and the adjusted SE's own
    # Monte Carlo error is below 1%: a 6% band.
    scenario = make_scenario(
        users={"count": 6000, "orders_per_week": 2.0, "rate_shape": 2.0, "history_days": 28,
               "basket_value_mean": 30.0, "basket_value_sd": 20.0},
        pools={"count": 4, "stock_cover": 1000.0}, calendar={"days": 28},
        graph={"model": "none"}, effect={"lift": 0.05},
        design=[{"kind": "user"}, {"kind": "user", "adjust": True}],
        study={"reps": 10, "seed": 2, "outcome": outcome})
    plan = plan_study(scenario, days=(7, 28))
    rows = {(r["label"], r["days"]): r for r in plan.rows}
    for entry in plan.cuped:
        d = entry["days"]
        measured = (rows["user-cuped", d]["mean_se"] / rows["user", d]["mean_se"]) ** 2
        assert measured == pytest.approx(entry["variance_factor"], rel=0.06), d
        assert entry["variance_factor"] == pytest.approx(1 - entry["rho"] ** 2)
    # The correlation grows with the duration (more orders, less Poisson noise).
    assert plan.cuped[1]["rho"] > plan.cuped[0]["rho"]


def test_stratification_variance_share_matches_the_measured_ratio():
    # A fixed share treated within strata (proportional allocation) keeps about the
    # within-stratum share of the outcome's variance (Cochran 1977, Sampling Techniques,
    # 5.6 [from memory]; Imbens & Rubin 2015, ch. 9); the plan measures that share in the
    # all-control world and the stratified designs measure their own standard errors. Same
    # 6% band as the CUPED check above (lift 5%, many users per stratum).
    scenario = make_scenario(
        users={"count": 6000, "orders_per_week": 2.0, "rate_shape": 2.0, "history_days": 28},
        pools={"count": 6, "stock_cover": 1000.0, "demand_spread": 0.8},
        calendar={"days": 28}, graph={"model": "none"}, effect={"lift": 0.05},
        design=[{"kind": "user"}, {"kind": "user", "strata": "pools"},
                {"kind": "user", "strata": "pre_period"}],
        study={"reps": 10, "seed": 2})
    plan = plan_study(scenario, days=(7, 28))
    rows = {(r["label"], r["days"]): r for r in plan.rows}
    for entry in plan.cuped:
        d = entry["days"]
        for label, key in (("user-strata-pools", "strata_pools"),
                           ("user-strata-pre", "strata_pre_period")):
            measured = (rows[label, d]["mean_se"] / rows["user", d]["mean_se"]) ** 2
            assert measured == pytest.approx(entry[key], rel=0.06), (d, label)
        assert entry["strata_pre_period"] < 0.9  # the check has teeth: strata help here
    assert "Stratified randomization of users would keep about" in plan.answer()
    print(plan.answer())


@pytest.mark.parametrize("outcome", ["orders", "revenue", "conversion"])
def test_cuped_rho_and_strata_shares_use_the_outcome_and_its_pre_period_analogue(outcome):
    # Computed directly from the all-control world's daily orders and the market's pre-period
    # orders and basket values: revenue = orders x basket value (pre-period the same),
    # conversion = any fulfilled order (pre-period: any order). rho is numpy's corrcoef and
    # its square the R^2 of statsmodels' OLS of the outcome on the covariate (simple
    # regression: R^2 = rho^2); the strata share is sum_s (n_s/n) S_s^2 / S^2 from pandas'
    # group variances (Cochran 1977, 5.6 [from memory]). Orders stay exactly as before.
    import pandas as pd
    import statsmodels.api as sm

    from spillgauge.designs.registry import make_design_spec
    from spillgauge.designs.user_level import market_strata
    from spillgauge.plan.replication import run_plan_replication
    from spillgauge.study.replication import simulate_replication_worlds

    scenario = make_scenario(
        users={"count": 1500, "orders_per_week": 1.5, "rate_shape": 1.5, "history_days": 14,
               "basket_value_mean": 30.0, "basket_value_sd": 25.0},
        pools={"count": 5, "stock_cover": 1.5, "demand_spread": 0.6}, calendar={"days": 14},
        graph={"model": "none"}, effect={"lift": 0.1},
        design=[{"kind": "user"}], study={"reps": 2, "seed": 4, "outcome": outcome})
    market = build_market(scenario, 4)
    result = run_plan_replication(scenario, 4, 1, (7, 14), market=market)
    _, panels = simulate_replication_worlds(market, scenario.designs, 4, 1, user_days=True)
    history, value = np.asarray(market.history), np.asarray(market.basket_value)
    for d in (7, 14):
        orders = panels[0].fulfilled[:, :d].sum(axis=1).astype(float)
        y, x = {"orders": (orders, history), "revenue": (orders * value, history * value),
                "conversion": ((orders > 0) * 1.0, (history > 0) * 1.0)}[outcome]
        rho = np.corrcoef(x, y)[0, 1]
        if outcome == "orders":
            assert result.history_correlation[d] == rho  # bit for bit, as before
        assert result.history_correlation[d] == pytest.approx(rho, rel=1e-9)
        r2 = sm.OLS(y, sm.add_constant(x)).fit().rsquared
        assert result.history_correlation[d] ** 2 == pytest.approx(r2, rel=1e-9)
        for source in ("pre_period", "pools"):
            strata = market_strata(market, make_design_spec("user", {"strata": source}))
            groups = pd.Series(y).groupby(strata)
            share = float((groups.size() / y.size * groups.var(ddof=1)).sum() / y.var(ddof=1))
            assert result.strata_within_share[d][source] == pytest.approx(share, rel=1e-9)
    assert 0.05 < result.history_correlation[14] < 0.95  # the covariate predicts, not perfectly
