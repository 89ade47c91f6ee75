"""The study's outcome (orders, conversion, revenue) against closed forms and invariances."""

from __future__ import annotations

import math

import numpy as np
import pytest

from spillgauge import run_study
from spillgauge.errors import ScenarioError
from spillgauge.market.build import build_market
from spillgauge.study.replication import run_replication
from tests.conftest import make_scenario

# No interference: no graph, stock far above demand, no carryover, a flat calendar.
_NO_INTERFERENCE = {"calendar": {"days": 7}, "pools": {"count": 4, "stock_cover": 50.0},
                    "graph": {"model": "none"}}


def _scenario(outcome="orders", users=None, effect=None, designs=None, **extra):
    return make_scenario(**_NO_INTERFERENCE, users={"count": 20_000, "orders_per_week": 0.7,
                                                    "rate_shape": 1.5, **(users or {})},
                         effect={"lift": 0.25, **(effect or {})},
                         study={"outcome": outcome, "reps": 2, "seed": 3},
                         design=designs or [{"kind": "user"}], **extra)


def test_conversion_truth_matches_the_gamma_poisson_closed_form():
    # Closed form (negative binomial zero term): N | G ~ Poisson(mu G), G ~ Gamma(k, 1/k) gives
    # P(N = 0) = E[exp(-mu G)] = (1 + mu / k)^(-k) = (k / (k + mu))^k, the Laplace transform of
    # the Gamma law (Johnson, Kemp & Kotz 2005, "Univariate Discrete Distributions", sec. 5.1);
    # so the share converting is 1 - (k / (k + mu))^k, with mu = orders over the horizon.
    scenario = _scenario("conversion")
    k, weeks, lift = 1.5, 1.0, 0.25
    shares = {"control": [], "treated": []}
    for rep in range(2):
        truth = run_replication(scenario, 3, rep, designs=()).truth
        shares["control"].append(truth.control_mean)
        shares["treated"].append(truth.treated_mean)
    n = scenario.users.count
    for arm, mu in (("control", 0.7 * weeks), ("treated", 0.7 * weeks * (1 + lift))):
        expected = 1 - (k / (k + mu)) ** k
        se = math.sqrt(expected * (1 - expected) / n)  # one replication's binomial SE
        assert abs(np.mean(shares[arm]) - expected) < 4 * se, (arm, shares[arm], expected)


_DESIGNS = [{"kind": "user"}, {"kind": "user", "label": "cuped", "adjust": True},
            {"kind": "cluster", "clusters": "pools"},
            {"kind": "switchback", "per": "pool", "block_hours": 12}]


def _small(outcome, users=None):
    return make_scenario(calendar={"days": 4}, users={"count": 600, **(users or {})},
                         pools={"count": 6, "stock_cover": 1.1}, graph={"model": "none"},
                         effect={"lift": 0.3, "carryover_half_life_hours": 3},
                         study={"outcome": outcome, "reps": 3, "seed": 8}, design=_DESIGNS)


def _estimates(study):
    return {(rep.replication, label): run.estimate
            for rep in study.replications for label, run in rep.runs.items()}


@pytest.mark.parametrize("value, exact", [(2.0, True), (1.37, False)])
def test_revenue_with_one_basket_value_is_that_value_times_the_orders(value, exact):
    # Invariance (common practice, no source): revenue = v x orders per user, so every mean,
    # difference and SE scales by v. With v a power of two every floating-point step scales
    # exactly (bit for bit); otherwise sums of v and v x sums differ in the last bits.
    orders = run_study(_small("orders"), workers=1)
    revenue = run_study(_small("revenue", {"basket_value_mean": value}), workers=1)
    check = (lambda a, b: a == b) if exact else (lambda a, b: a == pytest.approx(b, rel=1e-9))
    assert check(revenue.truth.gte, value * orders.truth.gte)
    est_o, est_r = _estimates(orders), _estimates(revenue)
    assert est_o.keys() == est_r.keys()
    for key, o in est_o.items():
        r = est_r[key]
        for name in ("point", "standard_error", "ci_low", "ci_high", "control_mean"):
            assert check(getattr(r, name), value * getattr(o, name)), (key, name)
        assert check(r.p_value, o.p_value), key
    assert (revenue.truth.gte_relative == pytest.approx(orders.truth.gte_relative, rel=1e-12))


def test_lognormal_basket_gte_is_lift_times_mean_value_rate_times_horizon():
    # Closed form (DESIGN.md's no-interference rule, GTE = lift x expected baseline orders,
    # weighted by value): without stock-outs or spillover the treated world adds
    # Poisson(lift lambda_i T) orders per user on common random numbers, so
    # GTE = lift x mean_i(v_i lambda_i) x T, with variance sum_i v_i^2 lift lambda_i T / n^2.
    # With v independent of lambda, E[v lambda] = E[v] E[lambda] (the population law).
    scenario = _scenario("revenue", users={"basket_value_mean": 30.0, "basket_value_sd": 45.0})
    market = build_market(scenario, 3)
    v, rate = market.basket_value, market.rate_per_hour
    hours, lift = 7 * 24.0, 0.25
    assert v.mean() == pytest.approx(30.0, rel=0.05)  # lognormal mean m (JKB 1994, ch. 14)
    assert v.std() == pytest.approx(45.0, rel=0.2)
    gtes = [run_replication(scenario, 3, rep, designs=()).truth.gte for rep in range(2)]
    expected = lift * np.mean(v * rate) * hours
    se = math.sqrt(np.sum(v ** 2 * lift * rate * hours)) / v.size / math.sqrt(2)
    assert abs(np.mean(gtes) - expected) < 4 * se
    population = lift * 30.0 * 0.7 / 168 * hours  # lift x E[v] E[lambda] x T
    # the market's own draw of v and lambda adds sd(v lambda) / sqrt(n) to the error
    spread = lift * hours * np.std(v * rate) / math.sqrt(v.size)
    assert abs(np.mean(gtes) - population) < 4 * math.hypot(se, spread)


def test_orders_is_the_default_and_draws_no_basket_value():
    scenario = make_scenario(users={"count": 50}, pools={"count": 2})
    assert scenario.study.outcome == "orders"
    assert np.all(build_market(scenario, 1).basket_value == 1.0)


@pytest.mark.parametrize("section, key, value", [("study", "outcome", "sales"),
                                                ("users", "basket_value_sd", -1.0),
                                                ("users", "basket_value_mean", 0.0)])
def test_bad_outcome_keys_are_named(section, key, value):
    with pytest.raises(ScenarioError, match=rf"{section}\.{key}.*{value}"):
        make_scenario(**{section: {key: value}})


def test_a_bad_basket_value_cell_names_its_line(tmp_path):
    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week,basket_value\na,p,1,2.5\nb,p,1,lots\n")
    scenario = make_scenario(users={"file": "users.csv"}, base_dir=tmp_path)
    with pytest.raises(ScenarioError, match=r"users\.file:basket_value \(line 3, user_id 'b'\)"):
        build_market(scenario, 0)


def test_the_basket_value_column_is_each_users_value(tmp_path):
    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week,basket_value\n"
                     "a,q,1,2.5\nb,p,1,4\nc,q,1,1\n")
    scenario = make_scenario(users={"file": "users.csv", "basket_value_sd": 3.0},
                             base_dir=tmp_path)
    market = build_market(scenario, 0)
    by_id = dict(zip(market.population.user_ids.tolist(), market.basket_value.tolist()))
    assert by_id == {"a": 2.5, "b": 4.0, "c": 1.0}  # the file's values win over the spread


def test_conversion_flows_sum_to_the_users_conversion():
    # Invariance: a switchback or rollout reads per pool tick the users converting for the
    # first time; summed over the horizon these are the users who converted.
    scenario = _small("conversion")
    result = run_replication(scenario, 8, 0, designs=(), user_days=True)
    from spillgauge.study.replication import simulate_replication_worlds

    _, panels = simulate_replication_worlds(build_market(scenario, 8), (), 8, 0, user_days=True)
    for panel in panels:
        assert set(np.unique(panel.outcome_total)) <= {0.0, 1.0}
        assert panel.pool_outcome.sum() == panel.outcome_total.sum()
        np.testing.assert_array_equal(panel.outcome_days.sum(axis=1), panel.outcome_total)
        assert np.all((panel.outcome_total == 1) == (panel.fulfilled_total > 0))
    assert result.truth.control_mean == panels[0].outcome_total.mean()


@pytest.mark.parametrize("extra, command, needle", [
    ('[study]\noutcome = "sales"\n', "check",
     'study.outcome must be one of "orders", "conversion", "revenue"; got \'sales\''),
    ("[users]\nbasket_value_sd = -2\n", "check", "users.basket_value_sd must be in [0, 1e9]; "
                                                 "got -2"),
])
def test_command_line_refuses_bad_outcome_input_in_one_line(tmp_path, extra, command, needle):
    import subprocess
    import sys

    path = tmp_path / "s.toml"
    path.write_text('name = "s"\n[calendar]\ndays = 2\n' + extra
                    + '[[design]]\nkind = "user"\n')
    args = [command, str(path)] + (["--design", "user", "--out", str(tmp_path / "x")]
                                   if command == "simulate" else [])
    result = subprocess.run([sys.executable, "-m", "spillgauge", *args], capture_output=True,
                            text=True)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1
    assert needle in result.stderr
