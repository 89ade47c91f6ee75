"""End to end under the null: simulate's files, read by analyze, cover a zero effect at 95%."""

from __future__ import annotations

import pytest
from scipy import stats

from spillgauge import analyze_experiment, simulate_experiment
from spillgauge.experiment.simulate import write_experiment
from tests.conftest import make_scenario

N_SEEDS = 200


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
    for seed in range(N_SEEDS):
        out = tmp_path / str(seed)
        experiment = simulate_experiment(scenario, label, seed=seed, start="2027-03-01")
        assert experiment.truth.gte == 0.0
        write_experiment(experiment, out)
        estimate = analyze_experiment(out).estimate
        if estimate.ci_low == estimate.ci_low:
            usable += 1
            covered += estimate.ci_low <= 0.0 <= estimate.ci_high
    assert usable == N_SEEDS
    print(f"{label}: {covered}/{N_SEEDS} intervals cover 0")
    assert stats.binomtest(covered, usable, 0.95).pvalue > 1e-3
