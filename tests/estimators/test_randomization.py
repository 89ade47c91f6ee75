"""Randomization inference as the reference the analytic intervals must agree with."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.estimators import (
    hajek_cluster,
    randomization_p_value,
    redraw_assignment,
    switchback_difference,
)
from tests.calibration.synthetic import cluster_world, switchback_world


def test_redraw_keeps_the_design():
    rng = np.random.default_rng(1)
    _, schedule, _ = cluster_world(10, rng=rng)
    again = redraw_assignment(schedule, rng=rng)
    assert again.is_treated.sum() == schedule.is_treated.sum()
    assert again.is_treated.shape == schedule.is_treated.shape
    assert np.array_equal(again.unit_of_user, schedule.unit_of_user)


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_cluster_p_value_agrees_with_randomization(seed):
    # Fisher's randomization test (Fisher 1935; Imbens & Rubin 2015, ch. 5) is exact under
    # the sharp null; the CR2 t test should give nearly the same p-value with 12 clusters
    # (agreement within 0.05: common practice, no source). The outcome gets a shift in
    # the treated clusters so that the p-values are moderate.
    rng = np.random.default_rng(seed)
    panel, schedule, _ = cluster_world(12, rng=rng, cluster_sd=0.3)
    from spillgauge.panel import OutcomePanel

    treated = schedule.user_is_treated()
    shifted = OutcomePanel.from_arrays(fulfilled=panel.user_fulfilled() + 1.0 * treated)
    analytic = hajek_cluster(shifted, schedule).p_value
    # under the sharp null of "no effect" the shifted outcomes are fixed
    exact = randomization_p_value(hajek_cluster, shifted, schedule, draws=2000, rng=rng)
    assert abs(analytic - exact) < 0.05, (analytic, exact)


# At 12 h burn-in the gap is per world, not a shift: over these 6 worlds the mean analytic
# and exact p-values are both 0.288 (signed gaps -0.16 to +0.17, mean absolute 0.104); over
# 20 worlds of the same stream the mean absolute gap is 0.068 (0.424 vs 0.441). The t test is
# calibrated over worlds (95% null coverage, tests/calibration), the randomization test given
# one world's outcomes: with half of every block estimated from the 3-4 unswitched blocks of
# an arm, which days are high decides the exact p-value in a way the t reference averages
# over. docs/designs.md (switchback) gives the derivation and the first block's part.
_BURN_IN_GAP = pytest.mark.xfail(strict=True, reason=(
    "burn-in p-values differ per world from the randomization reference (mean gap 0.104 over "
    "6 worlds, no shift: mean p 0.288 both); see the comment above"))


@pytest.mark.parametrize("burn_in_ticks", [0, pytest.param(12, marks=_BURN_IN_GAP)])
def test_switchback_p_value_agrees_with_randomization(burn_in_ticks):
    # Bojinov, Simchi-Levi & Zhao (2023): exact p-values for switchbacks by re-drawing the
    # blocks' Bernoulli arms. Averaged over worlds the analytic p-value should track the
    # randomization one (mean absolute gap under 0.08: common practice, no source).
    rng = np.random.default_rng(5)
    gaps = []
    for _ in range(6):
        panel, schedule = switchback_world(14, rng=rng)
        analytic = switchback_difference(panel, schedule, burn_in_ticks=burn_in_ticks).p_value
        exact = randomization_p_value(switchback_difference, panel, schedule, draws=400,
                                      rng=rng, burn_in_ticks=burn_in_ticks)
        if np.isfinite(analytic):
            gaps.append(abs(analytic - exact))
    assert np.mean(gaps) < 0.08, gaps
