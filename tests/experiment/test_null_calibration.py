"""End to end under the null: simulate's files, read by analyze, cover a zero effect at 95%."""

from __future__ import annotations

import pytest
from scipy import stats

from spillgauge import analyze_experiment, simulate_experiment
from spillgauge.experiment.simulate import write_experiment
from tests.conftest import make_scenario

N_SEEDS = 200


def _null_estimates(scenario, label, folder):
    """Yield, per seed, the estimate analyze reads back from a simulated null experiment."""
    for seed in range(N_SEEDS):
        out = folder / str(seed)
        experiment = simulate_experiment(scenario, label, seed=seed, start="2027-03-01")
        assert experiment.truth.gte == 0.0
        write_experiment(experiment, out)
        yield analyze_experiment(out).estimate


@pytest.mark.slow
@pytest.mark.parametrize("label", ["user", "cluster-pools", "switchback-24h",
                                   "user-strata-pools", "user-cuped-strata-pre"])
def test_intervals_from_files_cover_a_null_effect(tmp_path, label):
    # No lift, no peer effect, no carryover: the GTE is exactly 0 in every replication, so each
    # design's 95% interval should cover 0 in 95% of experiments (binomial test, 1e-3 level;
    # STYLE.md section 8 null calibration).
    scenario = make_scenario(
        name="null_market", calendar={"days": 16, "tick_hours": 4},
        users={"count": 400, "orders_per_week": 3.0}, pools={"count": 20, "stock_cover": 3.0},
        effect={"lift": 0.0}, design=[{"kind": "user"}, {"kind": "cluster"},
                                      {"kind": "switchback", "block_hours": 24},
                                      {"kind": "user", "strata": "pools"},
                                      {"kind": "user", "strata": "pre_period", "adjust": True}])
    covered = usable = 0
    for estimate in _null_estimates(scenario, label, tmp_path):
        if estimate.ci_low == estimate.ci_low:
            usable += 1
            covered += estimate.ci_low <= 0.0 <= estimate.ci_high
    assert usable == N_SEEDS
    print(f"{label}: {covered}/{N_SEEDS} intervals cover 0")
    assert stats.binomtest(covered, usable, 0.95).pvalue > 1e-3


@pytest.mark.slow
@pytest.mark.parametrize("outcome", ["conversion", "revenue"])
@pytest.mark.parametrize("label", ["user", "switchback-24h"])
def test_other_outcomes_from_files_cover_a_null_effect(tmp_path, outcome, label):
    # As above, for conversion (derived from the orders file, or the pool rows' conversions)
    # and revenue (lognormal basket values): with no effect the GTE is exactly 0, so each 95%
    # interval should cover 0 in 95% of experiments, and so should the relative interval
    # (delta method, Casella & Berger 2002, 5.5.4) cover a relative effect of 0 (binomial test,
    # 1e-3 level; STYLE.md section 8 null calibration).
    from spillgauge.estimators.relative import relative_effect

    scenario = make_scenario(
        name="null_market", calendar={"days": 16, "tick_hours": 4},
        users={"count": 400, "orders_per_week": 1.0, "basket_value_mean": 25.0,
               "basket_value_sd": 20.0},
        pools={"count": 20, "stock_cover": 3.0}, effect={"lift": 0.0},
        study={"outcome": outcome},
        design=[{"kind": "user"}, {"kind": "switchback", "block_hours": 24}])
    # Fieller's relative interval (Fieller 1954) is missing when the control mean is within q
    # SE of 0 (a few conversion switchbacks: conversion falls day by day, so the control
    # days' mean is noisy); where it exists it covers 0 exactly when the effect's does.
    covered = relative_covered = usable = relative_usable = 0
    for estimate in _null_estimates(scenario, label, tmp_path):
        relative = relative_effect(estimate)
        if estimate.ci_low == estimate.ci_low:
            usable += 1
            covered += estimate.ci_low <= 0.0 <= estimate.ci_high
        if relative.ci_low == relative.ci_low:
            relative_usable += 1
            relative_covered += relative.ci_low <= 0.0 <= relative.ci_high
            assert (relative.ci_low <= 0.0 <= relative.ci_high) == (
                estimate.ci_low <= 0.0 <= estimate.ci_high)
    assert usable == N_SEEDS
    assert relative_usable >= 0.95 * N_SEEDS
    print(f"{outcome} {label}: {covered}/{usable} intervals cover 0, relative "
          f"{relative_covered}/{relative_usable}; p = "
          f"{stats.binomtest(covered, usable, 0.95).pvalue:.3f}, "
          f"{stats.binomtest(relative_covered, relative_usable, 0.95).pvalue:.3f}")
    assert stats.binomtest(covered, usable, 0.95).pvalue > 1e-3
    assert stats.binomtest(relative_covered, relative_usable, 0.95).pvalue > 1e-3
