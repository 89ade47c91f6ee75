"""Stratified (blocked) user randomization and the stratified difference in means.

References: Imbens & Rubin (2015), *Causal Inference*, ch. 9 (stratified randomized
experiments: the estimator sum_s (n_s/n) tau_s and the variance
sum_s (n_s/n)^2 (s_1s^2/n_1s + s_0s^2/n_0s), unbiased for the randomization variance
when effects are constant within strata); Miratrix, Sekhon & Yu (2013), JRSS-B 75(2)
(the same form as the post-stratification variance); the equality of the Neyman
variance with the HC2 sandwich in a regression saturated in arm x stratum
(Samii & Aronow 2012, Stat. Prob. Letters; Imbens & Kolesar 2016, REStat) [from memory;
the identity is checked here against statsmodels]; Cochran (1977), *Sampling
Techniques*, 3rd ed., section 5.6 (proportional allocation keeps the within-stratum
share of the variance) [from memory].
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pytest
from scipy import stats

from spillgauge.designs import make_design_spec
from spillgauge.designs.registry import kind_of
from spillgauge.designs.user_level import draw_user_schedule, merge_small_strata
from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators import (
    difference_in_means,
    randomization_p_value,
    redraw_assignment,
    stratified_difference_in_means,
    stratified_regression_adjusted_difference,
)
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule


def _schedule(is_treated: np.ndarray, strata: np.ndarray) -> AssignmentSchedule:
    return AssignmentSchedule(unit_of_user=np.arange(is_treated.size),
                              is_treated=np.asarray(is_treated, bool)[:, None],
                              period_start_ticks=[0], n_ticks=1, treated_probability=0.5,
                              randomization="complete", stratum_of_unit=strata)


def _fixed_data(seed: int = 0, n_strata: int = 5):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(6, 30, n_strata)
    strata = np.repeat(np.arange(n_strata), sizes)
    schedule = draw_user_schedule(strata.size, 1, share=0.4, strata=strata, rng=rng)
    treated = schedule.user_is_treated()
    # orders are counts (a panel holds whole orders): Poisson with stratum-dependent means
    y = rng.poisson(rng.gamma(2.0, 3.0, strata.size) + 4.0 * strata
                    + 1.5 * treated * (1 + strata % 2)).astype(float)
    return y, treated, strata, schedule


def test_stratified_variance_equals_statsmodels_hc2_in_the_saturated_regression():
    # OLS of y on stratum dummies and stratum x treatment dummies: each interaction
    # coefficient is that stratum's difference in means, and its HC2 variance is exactly
    # s_1s^2/n_1s + s_0s^2/n_0s (Samii & Aronow 2012); strata's blocks of the sandwich do
    # not overlap, so w' V w with w_s = n_s / n is the stratified Neyman variance.
    import statsmodels.api as sm

    y, treated, strata, schedule = _fixed_data()
    dummies = (strata[:, None] == np.arange(strata.max() + 1)[None, :]).astype(float)
    design = np.hstack([dummies, dummies * treated[:, None]])
    fit = sm.OLS(y, design).fit(cov_type="HC2")
    k = dummies.shape[1]
    weight = dummies.sum(axis=0) / y.size
    est = stratified_difference_in_means(OutcomePanel.from_arrays(fulfilled=y), schedule)
    assert est.point == pytest.approx(weight @ fit.params[k:], rel=1e-12)
    variance = weight @ fit.cov_params()[k:, k:] @ weight
    assert est.standard_error ** 2 == pytest.approx(variance, rel=1e-10)


def test_stratified_variance_equals_the_closed_form_by_hand():
    # Imbens & Rubin (2015), eq. 9.2-9.3, written out stratum by stratum.
    y, treated, strata, schedule = _fixed_data(seed=4)
    point = variance = 0.0
    for s in np.unique(strata):
        a, b = y[(strata == s) & treated], y[(strata == s) & ~treated]
        w = (strata == s).mean()
        point += w * (a.mean() - b.mean())
        variance += w**2 * (a.var(ddof=1) / a.size + b.var(ddof=1) / b.size)
    est = stratified_difference_in_means(OutcomePanel.from_arrays(fulfilled=y), schedule)
    assert est.point == pytest.approx(point, rel=1e-12)
    assert est.standard_error == pytest.approx(np.sqrt(variance), rel=1e-12)
    # Satterthwaite (1946) degrees of freedom of the sum of the 2 x strata variance parts,
    # written out here in a loop (scipy's t quantile gives the half-width)
    parts = []
    for s in np.unique(strata):
        for arm in (True, False):
            v = y[(strata == s) & (treated == arm)]
            parts.append(((strata == s).mean() ** 2 * v.var(ddof=1) / v.size, v.size - 1))
    df = sum(p for p, _ in parts) ** 2 / sum(p**2 / k for p, k in parts)
    assert est.degrees_of_freedom == pytest.approx(df, rel=1e-10)
    assert est.ci_high - est.point == pytest.approx(
        stats.t.ppf(0.975, df) * np.sqrt(variance), rel=1e-10)


def test_one_stratum_is_the_difference_in_means():
    y, treated, _, _ = _fixed_data(seed=2)
    schedule = _schedule(treated, np.zeros(y.size, dtype=int))
    panel = OutcomePanel.from_arrays(fulfilled=y)
    a, b = stratified_difference_in_means(panel, schedule), difference_in_means(panel, schedule)
    assert (a.point, a.standard_error) == pytest.approx((b.point, b.standard_error), rel=1e-12)


def test_exact_randomization_distribution_by_enumeration():
    # Two strata (4 users, 2 treated; 6 users, 3 treated): all 6 x 20 = 120 assignments
    # are equally likely. With a constant effect tau = 2 the estimator is unbiased and the
    # expected variance estimate equals the true variance (Imbens & Rubin 2015, ch. 9),
    # which by the finite-population formula is sum_s w_s^2 S_s^2 (1/n_1s + 1/n_0s).
    y0 = np.array([1.0, 4.0, 2.0, 7.0, 10.0, 13.0, 11.0, 15.0, 12.0, 18.0])
    strata = np.array([0, 0, 0, 0, 1, 1, 1, 1, 1, 1])
    tau = 2.0
    points, variances = [], []
    for first in itertools.combinations(range(4), 2):
        for second in itertools.combinations(range(4, 10), 3):
            treated = np.isin(np.arange(10), first + second)
            est = stratified_difference_in_means(
                OutcomePanel.from_arrays(fulfilled=y0 + tau * treated),
                _schedule(treated, strata))
            points.append(est.point)
            variances.append(est.standard_error ** 2)
    assert len(points) == 120
    assert np.mean(points) == pytest.approx(tau, abs=1e-12)
    true_variance = np.var(points)
    by_formula = sum(((strata == s).mean()) ** 2 * y0[strata == s].var(ddof=1)
                     * (1 / n1 + 1 / (n - n1))
                     for s, n, n1 in ((0, 4, 2), (1, 6, 3)))
    assert true_variance == pytest.approx(by_formula, rel=1e-12)
    assert np.mean(variances) == pytest.approx(true_variance, rel=1e-12)


def test_draw_treats_round_share_times_size_in_every_stratum():
    # Blocked complete randomization: exactly round(p * n_s) treated per stratum.
    sizes = np.array([7, 10, 13, 25, 4])
    strata = np.repeat(np.arange(sizes.size), sizes)
    rng = np.random.default_rng(8)
    seen = np.zeros(strata.size)
    for share in (0.3, 0.5, 0.7):
        for _ in range(50):
            treated = draw_user_schedule(strata.size, 1, share=share, strata=strata,
                                         rng=rng).user_is_treated()
            counts = np.bincount(strata, weights=treated)
            assert counts.tolist() == [round(share * n) for n in sizes]
            seen += treated
    # every user is treated at some point: the draw is not a fixed pick
    assert (seen > 0).all()


def test_redraw_keeps_each_strata_treated_count_and_is_uniform_within():
    strata = np.array([0, 0, 0, 1, 1, 1, 1, 1])
    schedule = _schedule(np.array([1, 0, 0, 1, 1, 0, 0, 0], bool), strata)
    rng = np.random.default_rng(3)
    freq = np.zeros(8)
    n = 6000
    for _ in range(n):
        t = redraw_assignment(schedule, rng=rng).user_is_treated()
        assert np.bincount(strata, weights=t).tolist() == [1.0, 2.0]
        freq += t
    # each user of stratum 0 is treated with probability 1/3, of stratum 1 with 2/5
    expected = np.array([1 / 3] * 3 + [2 / 5] * 5)
    assert np.abs(freq / n - expected).max() < 4 * np.sqrt(0.25 / n)


def test_randomization_variance_matches_the_sharp_null_formula():
    # Under the sharp null (outcomes fixed) the re-drawn points have variance
    # sum_s w_s^2 S_s^2 (1/n_1s + 1/n_0s) (Imbens & Rubin 2015, ch. 9): Monte Carlo over
    # re-draws within strata agrees within its error (variance SE ~ var * sqrt(2/(R-1))).
    y, treated, strata, schedule = _fixed_data(seed=6)
    panel = OutcomePanel.from_arrays(fulfilled=y)
    rng = np.random.default_rng(1)
    draws = 3000
    points = np.array([stratified_difference_in_means(
        panel, redraw_assignment(schedule, rng=rng)).point for _ in range(draws)])
    n1 = np.bincount(strata, weights=treated)
    n_s = np.bincount(strata)
    s2 = np.array([y[strata == s].var(ddof=1) for s in range(n_s.size)])
    formula = float(np.sum((n_s / y.size) ** 2 * s2 * (1 / n1 + 1 / (n_s - n1))))
    assert abs(points.var(ddof=1) / formula - 1) < 4 * np.sqrt(2 / (draws - 1))
    assert abs(points.mean()) < 4 * np.sqrt(formula / draws)


def test_randomization_p_value_agrees_with_the_normal_p_value():
    # With ~200 users in 4 strata the stratified estimate is close to normal, so Fisher's
    # p-value from within-stratum re-draws and the analytic p-value agree to a few points
    # (common practice, no source, for the tolerance); both are < alpha or > alpha together.
    rng = np.random.default_rng(12)
    strata = np.repeat(np.arange(4), 50)
    schedule = draw_user_schedule(strata.size, 1, share=0.5, strata=strata, rng=rng)
    for shift in (0.0, 0.6):
        # whole orders: tenths of a unit-scale normal outcome, shifted to stay positive
        y = np.round(10 * (rng.normal(3.0 * strata, 1.5) + shift * schedule.user_is_treated())
                     + 100)
        panel = OutcomePanel.from_arrays(fulfilled=y)
        est = stratified_difference_in_means(panel, schedule)
        analytic = 2 * stats.t.sf(abs(est.point / est.standard_error), est.degrees_of_freedom)
        fisher = randomization_p_value(stratified_difference_in_means, panel, schedule,
                                       draws=4000, rng=np.random.default_rng(int(shift * 10)))
        assert abs(fisher - analytic) < 0.03, (shift, fisher, analytic)


def _null_world(rng, strata, share=0.5):
    # Gamma-Poisson orders (the project's population model) with stratum-dependent means,
    # no effect: the truth is 0.
    rates = rng.gamma(2.0, (1.0 + strata) / 2.0)
    y = rng.poisson(rates * 4.0).astype(float)
    schedule = draw_user_schedule(strata.size, 1, share=share, strata=strata, rng=rng)
    return OutcomePanel.from_arrays(fulfilled=y, history=rng.poisson(rates * 3.0)), schedule


def _null_coverage(reps: int, seed: int, estimator=stratified_difference_in_means,
                   share: float = 0.5) -> tuple[int, int]:
    rng = np.random.default_rng(seed)
    strata = np.repeat(np.arange(6), [12, 20, 30, 40, 50, 8])
    hits = 0
    for _ in range(reps):
        panel, schedule = _null_world(rng, strata, share)
        est = estimator(panel, schedule)
        hits += est.ci_low <= 0.0 <= est.ci_high
    return hits, reps


def test_null_coverage_fast():
    # 95% coverage within binomial error (scipy.stats.binomtest, two-sided, level 0.001).
    hits, reps = _null_coverage(600, seed=21)
    assert stats.binomtest(hits, reps, 0.95).pvalue > 0.001, hits / reps


@pytest.mark.slow
@pytest.mark.parametrize("estimator", [stratified_difference_in_means,
                                       stratified_regression_adjusted_difference])
@pytest.mark.parametrize("share", [0.5, 0.3])
def test_null_coverage(estimator, share):
    hits, reps = _null_coverage(6000, seed=22, estimator=estimator, share=share)
    print(f"{estimator.__name__} share {share}: {hits}/{reps} = {hits / reps:.4f}")
    assert stats.binomtest(hits, reps, 0.95).pvalue > 0.001, hits / reps


def test_stratification_keeps_the_within_stratum_share_of_the_variance():
    # Proportional allocation (Cochran 1977, 5.6): Var(stratified) / Var(complete) ~
    # within-stratum variance / total variance = 1 - eta^2 for large strata. Monte Carlo
    # over assignments of one fixed population; tolerance from the variance ratio's error.
    rng = np.random.default_rng(5)
    strata = np.repeat(np.arange(5), 80)
    y = np.round(10 * rng.normal(2.0 * strata, 1.0) + 100)  # whole orders
    panel = OutcomePanel.from_arrays(fulfilled=y)
    unstratified = _schedule(np.arange(y.size) < 200, np.zeros(y.size, dtype=int))
    reps = 3000
    plain = np.array([difference_in_means(panel, redraw_assignment(
        unstratified, rng=rng)).point for _ in range(reps)])
    blocked_schedule = draw_user_schedule(y.size, 1, share=0.5, strata=strata, rng=rng)
    blocked = np.array([stratified_difference_in_means(panel, redraw_assignment(
        blocked_schedule, rng=rng)).point for _ in range(reps)])
    within = sum(y[strata == s].var() * 80 for s in range(5)) / y.size
    ratio = blocked.var(ddof=1) / plain.var(ddof=1)
    assert abs(ratio / (within / y.var()) - 1) < 4 * np.sqrt(4 / (reps - 1))


def test_cuped_within_strata_keeps_the_point_unbiased_and_shrinks_the_se():
    # Deng et al. (2013): adjusting for a pre-period covariate correlated with the outcome
    # shrinks the variance by about 1 - rho^2 (within strata here); the point stays unbiased.
    rng = np.random.default_rng(9)
    strata = np.repeat(np.arange(4), 100)
    plain, adjusted = [], []
    for _ in range(400):
        x = rng.normal(0, 1, strata.size)
        schedule = draw_user_schedule(strata.size, 1, share=0.5, strata=strata, rng=rng)
        y = np.round(100 * (strata + 0.9 * x + rng.normal(0, np.sqrt(1 - 0.81), strata.size)
                            + 0.5 * schedule.user_is_treated()) + 1000)  # whole orders
        panel = OutcomePanel.from_arrays(fulfilled=y, history=x)
        plain.append(stratified_difference_in_means(panel, schedule).point)
        adjusted.append(stratified_regression_adjusted_difference(panel, schedule).point)
    plain, adjusted = np.array(plain), np.array(adjusted)
    assert abs(adjusted.mean() - 50) < 4 * adjusted.std() / np.sqrt(adjusted.size)
    # rho = 0.9 within strata: the ratio of variances is about 0.19
    assert 0.12 < adjusted.var() / plain.var() < 0.28


def test_degenerate_strata_warn():
    y = np.arange(6.0)
    with pytest.warns(DegenerateEstimateWarning, match="empty arm"):
        est = stratified_difference_in_means(OutcomePanel.from_arrays(fulfilled=y), _schedule(
            np.array([1, 1, 0, 0, 1, 1], bool), np.array([0, 0, 0, 0, 1, 1])))
    assert np.isnan(est.point)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        merged = merge_small_strata(np.array([0, 0, 0, 0, 1, 1, 2, 2, 2, 2]), 0.5)
    assert merged.tolist() == [0, 0, 0, 0, 0, 0, 1, 1, 1, 1]


def test_design_spec_labels_and_estimators():
    for params, label, estimator in (
            ({}, "user", "difference_in_means"),
            ({"strata": "pools"}, "user-strata-pools", "stratified_difference_in_means"),
            ({"strata": "pre_period", "adjust": True}, "user-cuped-strata-pre",
             "stratified_regression_adjusted_difference"),
            ({"strata": "pre_period", "pre_period_strata": 8}, "user-strata-pre8",
             "stratified_difference_in_means")):
        spec = make_design_spec("user", params)
        assert spec.label == label
        assert kind_of(spec).estimator_name(spec) == estimator


def test_scenario_refuses_what_a_stratified_design_cannot_run():
    from spillgauge.errors import ScenarioError
    from tests.conftest import make_scenario

    base = dict(users={"count": 200, "history_days": 14}, pools={"count": 4})
    with pytest.raises(ScenarioError, match=r"design\[0\]\.randomization"):
        make_scenario(**base, design=[{"kind": "user", "strata": "pools",
                                       "randomization": "bernoulli"}])
    with pytest.raises(ScenarioError, match=r"design\[0\]\.strata"):
        make_scenario(users={"count": 200, "history_days": 0},
                      design=[{"kind": "user", "strata": "pre_period"}])
    # 200 users in 100 groups of 2 cannot hold two users per arm
    with pytest.raises(ScenarioError, match=r"design\[0\]\.pre_period_strata"):
        make_scenario(**base, design=[{"kind": "user", "strata": "pre_period",
                                       "pre_period_strata": 100}])
    with pytest.raises(ScenarioError, match=r"design\[0\]\.strata"):
        make_scenario(**base, design=[{"kind": "user", "strata": "region"}])


def test_market_strata_are_pre_period_order_groups_or_pools():
    from spillgauge.designs.user_level import market_strata
    from spillgauge.market.build import build_market
    from tests.conftest import make_scenario

    scenario = make_scenario(users={"count": 403, "history_days": 14}, pools={"count": 5},
                             design=[{"kind": "user", "strata": "pre_period"},
                                     {"kind": "user", "strata": "pools"}])
    market = build_market(scenario, 3)
    pre = market_strata(market, scenario.designs[0])
    sizes = np.bincount(pre)
    assert sizes.size == 4 and sizes.max() - sizes.min() <= 1  # order quantile groups
    history = np.asarray(market.history)
    # groups are ordered: every user of group g has no more pre-period orders than group g+1
    assert all(history[pre == g].max() <= history[pre == g + 1].min() for g in range(3))
    pools = market_strata(market, scenario.designs[1])
    assert np.array_equal(np.unique(pools, return_inverse=True)[1],
                          np.unique(market.pool_of_user, return_inverse=True)[1])


def test_relative_effect_is_the_delta_method_on_the_stratified_means_by_hand():
    # The stratified control mean C = sum_s w_s mean_0s has Var(C) = sum_s w_s^2 s_0s^2/n_0s,
    # and the effect D = sum_s w_s (mean_1s - mean_0s) has Cov(D, C) = -Var(C) (independent
    # strata and arms). Delta method for R = D / C (Casella & Berger 2002, sec. 5.5.4):
    # Var(R) = [Var(D) - 2 R Cov(D, C) + R^2 Var(C)] / C^2, written out here.
    from spillgauge.estimators.relative import relative_effect

    y, treated, strata, schedule = _fixed_data(seed=11)
    est = stratified_difference_in_means(OutcomePanel.from_arrays(fulfilled=y), schedule)
    w = np.bincount(strata) / y.size
    c = sum(w[s] * y[(strata == s) & ~treated].mean() for s in range(w.size))
    var_c = sum(w[s] ** 2 * y[(strata == s) & ~treated].var(ddof=1)
                / y[(strata == s) & ~treated].size for s in range(w.size))
    d, var_d = est.point, est.standard_error ** 2
    r = d / c
    rel = relative_effect(est)
    assert rel.point == pytest.approx(r, rel=1e-12)
    assert rel.standard_error == pytest.approx(
        np.sqrt((var_d + 2 * r * var_c + r**2 * var_c) / c**2), rel=1e-10)


@pytest.mark.parametrize("lift", [0.0, 0.3])
def test_relative_interval_covers_the_relative_effect(lift):
    # Coverage of the relative effect's interval within binomial error of 95%
    # (scipy.stats.binomtest, level 0.001): a new sample of users each draw, Gamma-Poisson
    # orders with stratum-dependent rates, the treated arm's rates times (1 + lift).
    from spillgauge.estimators.relative import relative_effect

    rng = np.random.default_rng(40 + int(lift * 10))
    strata = np.repeat(np.arange(4), [60, 80, 100, 160])
    covered = 0
    for _ in range(600):
        schedule = draw_user_schedule(strata.size, 1, share=0.5, strata=strata, rng=rng)
        rates = rng.gamma(2.0, (1.0 + strata) / 2.0) * np.where(
            schedule.user_is_treated(), 1 + lift, 1.0)
        rel = relative_effect(stratified_difference_in_means(
            OutcomePanel.from_arrays(fulfilled=rng.poisson(rates * 3.0)), schedule))
        covered += rel.ci_low <= lift <= rel.ci_high
    assert stats.binomtest(covered, 600, 0.95).pvalue > 0.001, covered
