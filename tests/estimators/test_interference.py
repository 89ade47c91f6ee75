"""The test of interference (Saveski et al. 2017; REFERENCES.md section 6 and check 14)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from spillgauge.designs import draw_interference_schedule
from spillgauge.estimators import interference_test
from spillgauge.panel import OutcomePanel

N_CLUSTERS, SIZE = 40, 25
CLUSTERS = np.repeat(np.arange(N_CLUSTERS), SIZE)


def _rejection_rates(spillover: float, reps: int, seed: int) -> tuple[float, float]:
    """Outcomes y = base + 1.0 * own treatment + spillover * (treated share of the cluster)."""
    rng = np.random.default_rng(seed)
    base = rng.gamma(2.0, 2.0, size=CLUSTERS.size) + rng.normal(0, 1, N_CLUSTERS)[CLUSTERS]
    normal = chebyshev = 0
    for _ in range(reps):
        schedule = draw_interference_schedule(CLUSTERS, 1, rng=rng)
        treated = schedule.user_is_treated().astype(float)
        share = np.bincount(CLUSTERS, weights=treated) / SIZE
        y = base + treated + spillover * share[CLUSTERS] + rng.normal(0, 1, CLUSTERS.size)
        panel = OutcomePanel.from_arrays(fulfilled=np.zeros((CLUSTERS.size, 1), dtype=int))
        # the estimator reads per-user totals: put the real-valued outcome in a float panel
        panel = OutcomePanel(fulfilled=y[:, None], demanded=y[:, None],
                             pool_of_user=panel.pool_of_user, history=panel.history,
                             pool_fulfilled=panel.pool_fulfilled,
                             pool_demanded=panel.pool_demanded, pool_lost=panel.pool_lost,
                             pool_stock=panel.pool_stock)
        result = interference_test(panel, schedule, confidence=0.95)
        normal += result.rejects
        chebyshev += result.rejects_chebyshev
    return normal / reps, chebyshev / reps


def test_without_interference_the_test_keeps_its_level():
    # REFERENCES check 14 (Saveski et al. 2017; Pouget-Abadie et al. 2019): with no
    # interference the rejection rate at the Chebyshev threshold 1/sqrt(alpha) = 4.4721 is
    # <= alpha, and at the normal threshold 1.95996 it is about alpha (the variance is
    # conservative, so at most alpha up to Monte Carlo error). Binomial tolerance.
    reps = 2000
    normal, chebyshev = _rejection_rates(0.0, reps, seed=1)
    assert chebyshev <= 0.05
    covered = int(round(normal * reps))
    assert stats.binomtest(covered, reps, 0.05, alternative="greater").pvalue > 1e-3


def test_rejection_rises_with_spillover():
    # REFERENCES check 14: adding spillover raises the rejection rate.
    rates = [_rejection_rates(g, 300, seed=2)[0] for g in (0.0, 1.0, 2.5)]
    assert rates[0] < rates[1] < rates[2]
    assert rates[2] > 0.8


def test_halves_and_shares_of_the_design():
    schedule = draw_interference_schedule(CLUSTERS, 1, rng=np.random.default_rng(3))
    arm = schedule.is_cluster_arm
    assert arm.sum() == N_CLUSTERS // 2
    treated = schedule.user_is_treated()
    in_cluster_arm = arm[CLUSTERS]
    per_cluster = np.bincount(CLUSTERS, weights=treated) / SIZE
    assert set(np.unique(per_cluster[arm])) <= {0.0, 1.0}  # whole clusters
    assert treated[~in_cluster_arm].mean() == pytest.approx(0.5)  # users one by one
    with pytest.raises(ValueError, match="at least 7 clusters"):
        draw_interference_schedule(np.repeat(np.arange(6), 2), 1, rng=np.random.default_rng(0))


def test_seven_clusters_give_a_test_in_every_draw():
    # MIN_CLUSTERS = 7: the cluster half holds round(7 / 2) = 4 clusters, 2 per arm, so every
    # draw has a variance and a p-value (with 6 clusters one arm of the half has 1 cluster in
    # every draw, hence the refusal); worked by hand from draw_treated_units' rounding.
    from tests.calibration.synthetic import interference_world

    rng = np.random.default_rng(11)
    for _ in range(50):
        panel, schedule = interference_world(7, rng=rng)
        assert 0.0 <= interference_test(panel, schedule).p_value <= 1.0
