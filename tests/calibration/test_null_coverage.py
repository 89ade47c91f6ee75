"""Null calibration of the estimators' intervals on synthetic worlds.

A 95% interval must cover the truth in about 95% of replications; each check
uses ``scipy.stats.binomtest`` against 0.95 (two-sided, level 0.001, so a
correct interval fails about once in a thousand runs). Long runs are marked
``slow``; the unmarked ones are quick sanity versions with fewer replications.
"""

from __future__ import annotations

import functools
import warnings

import numpy as np
import pytest
from scipy import stats

from spillgauge.estimators import (
    hajek_cluster,
    horvitz_thompson_cluster,
    switchback_difference,
)
from tests.calibration.synthetic import cluster_world, switchback_world


def coverage(estimates, truths) -> tuple[int, int]:
    """Return (intervals covering the truth, intervals) over finite intervals."""
    hits = total = 0
    for est, truth in zip(estimates, truths):
        if np.isfinite(est.ci_low) and np.isfinite(est.ci_high):
            total += 1
            hits += est.ci_low <= truth <= est.ci_high
    return hits, total


def assert_covers_95(hits: int, total: int) -> None:
    # Binomial test of coverage = 0.95 (scipy.stats.binomtest), level 0.001.
    result = stats.binomtest(hits, total, 0.95)
    assert result.pvalue > 0.001, f"coverage {hits}/{total} = {hits / total:.3f}"


def cluster_coverage(estimator, n_clusters: int, reps: int, seed: int, **world):
    rng = np.random.default_rng(seed)
    estimates, truths = [], []
    for _ in range(reps):
        panel, schedule, gte = cluster_world(n_clusters, rng=rng, **world)
        estimates.append(estimator(panel, schedule))
        truths.append(gte)
    return coverage(estimates, truths)


@functools.cache  # the two-sided and one-sided checks share one run
def switchback_coverage(n_blocks: int, burn_in_ticks: int, share: float, reps: int,
                        seed: int):
    rng = np.random.default_rng(seed)
    estimates = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(reps):
            panel, schedule = switchback_world(n_blocks, share=share, rng=rng)
            estimates.append(switchback_difference(panel, schedule,
                                                   burn_in_ticks=burn_in_ticks))
    return coverage(estimates, [0.0] * reps)


@pytest.mark.slow
@pytest.mark.parametrize("n_clusters", [4, 8, 12])
@pytest.mark.parametrize("unequal", [False, True])
def test_hajek_cluster_covers_under_the_null(n_clusters, unequal):
    # CR2 with Bell-McCaffrey degrees of freedom (Bell & McCaffrey 2002; Imbens & Kolesar
    # 2016) is exact for equal clusters under normal errors and close otherwise.
    assert_covers_95(*cluster_coverage(hajek_cluster, n_clusters, 4000, n_clusters,
                                       unequal=unequal))


@pytest.mark.slow
@pytest.mark.parametrize("n_clusters", [4, 8, 12])
def test_hajek_cluster_covers_with_cluster_heterogeneous_effects(n_clusters):
    # Neyman (1923): with effects that differ across clusters the per-arm variance is
    # conservative, so coverage is at least 95% (one-sided check).
    hits, total = cluster_coverage(hajek_cluster, n_clusters, 4000, 100 + n_clusters,
                                   effect_sd=1.0)
    assert stats.binomtest(hits, total, 0.95, alternative="less").pvalue > 0.001, hits / total


@pytest.mark.slow
@pytest.mark.parametrize("n_clusters", [4, 8, 12])
def test_horvitz_thompson_cluster_covers_under_the_null(n_clusters):
    assert_covers_95(*cluster_coverage(horvitz_thompson_cluster, n_clusters, 4000,
                                       200 + n_clusters))


@pytest.mark.slow
@pytest.mark.parametrize(("share", "burn_in_ticks"), [
    (0.5, 0), (0.5, 6), (0.5, 12), (0.5, 18),
    (0.3, 0), (0.3, 6), (0.3, 12), (0.3, 18)])
def test_switchback_burn_in_covers_under_the_null(share, burn_in_ticks):
    # 14 daily blocks with AR(1) daily shocks and a diurnal rhythm; sharp null. The burn-in
    # hours of an unswitched block share the previous block's arm, so the variance adds the
    # lag-1 products of consecutive blocks' scores (the design's joint exposures: Aronow &
    # Samii 2017; Bojinov, Simchi-Levi & Zhao 2023); the t reference is the studentized
    # estimate's exact distribution under the working model (Imhof 1961), among the draws
    # whose variance estimate is positive (a draw without one gives no interval and is not
    # counted here). Before: 93.3% and 92.0% at 12 and 18 h (share 0.5), 92.1-93.2% at share
    # 0.3; then 96.4% at 18 h (share 0.5) while the quantile counted the 1.6% of draws
    # without an interval as misses (0.949 / 0.984). A draw whose variance is not positive
    # now takes the lag-1 products' bound (2xy <= x^2 + y^2): at 18 h, share 0.5, 98.4% ->
    # 99.8% of draws with an interval, coverage 94.8% -> 94.7%.
    assert_covers_95(*switchback_coverage(14, burn_in_ticks, share, 3000, burn_in_ticks))


@pytest.mark.slow
@pytest.mark.parametrize("share", [0.5, 0.3])
@pytest.mark.parametrize("burn_in_ticks", [0, 6, 12, 18])
def test_switchback_burn_in_is_not_short_under_the_null(share, burn_in_ticks):
    # One-sided binomtest: coverage at least 95% at every burn-in (before the lag-1 products
    # it was 92.0-93.3% at 12-18 h).
    hits, total = switchback_coverage(14, burn_in_ticks, share, 3000, burn_in_ticks)
    assert stats.binomtest(hits, total, 0.95, alternative="less").pvalue > 0.001, hits / total


def test_hajek_cluster_few_clusters_quick():
    assert_covers_95(*cluster_coverage(hajek_cluster, 6, 600, 1))


def test_switchback_burn_in_quick():
    assert_covers_95(*switchback_coverage(14, 12, 0.5, 600, 2))


def rollout_coverage(reps: int, seed: int, **world):
    from spillgauge.estimators import staggered_difference_in_differences
    from tests.calibration.synthetic import rollout_world

    rng = np.random.default_rng(seed)
    estimates, truths = [], []
    for _ in range(reps):
        panel, schedule, gte = rollout_world(rng=rng, **world)
        estimates.append(staggered_difference_in_differences(panel, schedule))
        truths.append(gte)
    errors = np.array([e.point - g for e, g in zip(estimates, truths)])
    return (*coverage(estimates, truths), errors)


ROLLOUT_WORLDS = {
    "null": {},
    "daily shocks": {"lift": 0.3, "lift_sd": 0.1, "shock_sd": 0.4, "users_per_pool": 2000,
                     "rate_per_user_hour": 0.05},
    "diurnal, 6 h periods": {"lift": 0.3, "waves": 7, "days": 2, "amplitude": 0.9,
                             "users_per_pool": 2000, "rate_per_user_hour": 0.05},
}


@pytest.mark.slow
@pytest.mark.parametrize("world", ["null", "daily shocks", "diurnal, 6 h periods"])
def test_staggered_rollout_covers_and_is_unbiased(world):
    # Coverage at least 95% (one-sided binomtest: the extrapolation term for the all-control
    # period is conservative) and mean error within 4 Monte Carlo SE of 0: the staggered
    # comparison is design-unbiased for each period's effect (Callaway & Sant'Anna 2021).
    # The small-sample factor and df come from a working model with a pool level shared by
    # the pool's periods (CR2-type, Bell & McCaffrey 2002; Pustejovsky & Tipton 2018).
    # Measured (1500 replications, seed 7): null 96.9%, daily shocks 98.0%, diurnal with
    # 6 h periods 96.5% (mean variance / squared error 0.96, median df 4.5). With the
    # working model of independent pool-period rates the diurnal case covered 93.3%
    # (variance 0.85 of the squared error, median df 8): under a rhythm a pool's level
    # moves every period's change d_pk together.
    hits, total, errors = rollout_coverage(1500, 7, **ROLLOUT_WORLDS[world])
    assert stats.binomtest(hits, total, 0.95, alternative="less").pvalue > 0.001, hits / total
    assert abs(errors.mean()) < 4 * errors.std(ddof=1) / np.sqrt(errors.size)


def test_staggered_rollout_quick():
    hits, total, errors = rollout_coverage(300, 8, **ROLLOUT_WORLDS["daily shocks"])
    assert_covers_95(hits, total)
    assert abs(errors.mean()) < 4 * errors.std(ddof=1) / np.sqrt(errors.size)


def interference_rejections(n_clusters: int, reps: int, seed: int, **world):
    from spillgauge.estimators import interference_test
    from tests.calibration.synthetic import interference_world

    rng = np.random.default_rng(seed)
    rejections = tests = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(reps):
            result = interference_test(*interference_world(n_clusters, rng=rng, **world))
            if np.isfinite(result.p_value):
                tests += 1
                rejections += result.rejects
    return rejections, tests


@pytest.mark.slow
@pytest.mark.parametrize("n_clusters", [8, 12, 20])
def test_interference_test_keeps_its_level_with_heterogeneous_effects(n_clusters):
    # No interference, effects differing across clusters: rejection at most 5% within
    # binomial error (one-sided binomtest), as the split-variance term restores
    # (Pouget-Abadie et al. 2019; Saveski et al. 2017).
    rejections, tests = interference_rejections(n_clusters, 3000, 40 + n_clusters)
    assert stats.binomtest(rejections, tests, 0.05, alternative="greater").pvalue > 0.001


def test_interference_test_level_quick():
    rejections, tests = interference_rejections(12, 500, 3)
    assert stats.binomtest(rejections, tests, 0.05, alternative="greater").pvalue > 0.001
