"""Estimators: pure functions from an outcome panel and a schedule to an :class:`Estimate`.

One module per estimator family: :mod:`~spillgauge.estimators.user_level`,
:mod:`~spillgauge.estimators.cluster_level`, :mod:`~spillgauge.estimators.exposure`
and :mod:`~spillgauge.estimators.switchback`. Every estimator takes
``(panel, schedule, *, confidence=0.95, ...)`` and returns its estimate on the
GTE's scale, fulfilled orders per user over the horizon.
"""

from __future__ import annotations

from spillgauge.estimators.cluster_level import hajek_cluster, horvitz_thompson_cluster
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.exposure import (
    exposure_probabilities,
    hajek_exposure,
    horvitz_thompson_exposure,
)
from spillgauge.estimators.interference import InterferenceTest, interference_test
from spillgauge.estimators.launch import (
    launch_difference_in_differences,
    pre_post_difference,
    synthetic_control,
)
from spillgauge.estimators.propensity import (
    augmented_inverse_probability_weighting,
    inverse_probability_weighting,
    propensity_score_matching,
)
from spillgauge.estimators.randomization import randomization_p_value, redraw_assignment
from spillgauge.estimators.rollout import (
    difference_in_differences,
    staggered_difference_in_differences,
    two_way_fixed_effects_period_weights,
)
from spillgauge.estimators.stratified import (
    stratified_difference_in_means,
    stratified_regression_adjusted_difference,
)
from spillgauge.estimators.switchback import (
    switchback_difference,
    switchback_exposure_probabilities,
    switchback_optimal_points,
)
from spillgauge.estimators.synthetic_did import synthetic_difference_in_differences
from spillgauge.estimators.user_level import (
    difference_in_means,
    regression_adjusted_difference,
)

__all__ = [
    "Estimate",
    "difference_in_means",
    "regression_adjusted_difference",
    "stratified_difference_in_means",
    "stratified_regression_adjusted_difference",
    "hajek_cluster",
    "horvitz_thompson_cluster",
    "exposure_probabilities",
    "horvitz_thompson_exposure",
    "hajek_exposure",
    "switchback_difference",
    "difference_in_differences",
    "staggered_difference_in_differences",
    "two_way_fixed_effects_period_weights",
    "interference_test",
    "InterferenceTest",
    "switchback_optimal_points",
    "switchback_exposure_probabilities",
    "redraw_assignment",
    "randomization_p_value",
    "propensity_score_matching",
    "inverse_probability_weighting",
    "augmented_inverse_probability_weighting",
    "pre_post_difference",
    "launch_difference_in_differences",
    "synthetic_control",
    "synthetic_difference_in_differences",
]
