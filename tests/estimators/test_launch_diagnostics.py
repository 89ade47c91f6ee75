"""A launch's footing: balance and overlap of an opt-in, pre-launch fit of synthetic control."""

from __future__ import annotations

import math

import numpy as np
import pytest

from spillgauge.estimators.estimate import Estimate, LaunchDiagnostic
from spillgauge.estimators.launch import synthetic_control, synthetic_control_weights
from spillgauge.estimators.propensity import balance_and_overlap, propensity_covariates
from spillgauge.study.replication import DesignRun
from tests.calibration.launch_worlds import launch_world


def _opt_in(seed: int, n: int = 1500):
    rng = np.random.default_rng(seed)
    history = rng.poisson(rng.gamma(2.0, 2.0, n)).astype(float)
    pools = rng.integers(0, 4, n)
    p = 1 / (1 + np.exp(-(-1.5 + 0.25 * history)))
    return history, pools, rng.random(n) < p


def test_balance_by_weighting_equals_a_hand_computation():
    # Austin (2009): SMD = (mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / 2); after weighting the
    # control mean is weighted by the odds p / (1 - p) (the ATT weights), over the same
    # unadjusted SD. The score is statsmodels' Logit fit on the same covariates.
    import statsmodels.api as sm

    history, pools, t = _opt_in(1)
    x = propensity_covariates(history, pools)
    fit = balance_and_overlap(history, t, x, adjustment="weighting")
    p = sm.Logit(t.astype(float), x).fit(disp=0).predict(x)
    scale = math.sqrt((history[t].var(ddof=1) + history[~t].var(ddof=1)) / 2)
    before = (history[t].mean() - history[~t].mean()) / scale
    odds = p[~t] / (1 - p[~t])
    after = (history[t].mean() - np.sum(odds * history[~t]) / odds.sum()) / scale
    assert fit.smd_before == pytest.approx(before, rel=1e-9)
    assert fit.smd_after == pytest.approx(after, rel=1e-6)
    assert fit.smd_before > 0.5 and abs(fit.smd_after) < 0.1  # the weights balance history
    outside = np.mean((p[t] > p[~t].max()) | (p[t] < p[~t].min()))
    assert fit.off_support_share == pytest.approx(outside)
    assert math.isnan(fit.unmatched_share)


def test_matching_balances_history_and_counts_the_unmatched():
    # Matching on a score that is monotone in history pairs adopters with non-adopters of
    # nearly the same history, so the SMD after matching is near 0 (Austin 2009's 0.1 rule;
    # common practice); every adopter outside the caliper counts as unmatched.
    history, pools, t = _opt_in(2)
    fit = balance_and_overlap(history, t, propensity_covariates(history, pools),
                              adjustment="matching")
    assert abs(fit.smd_after) < 0.1 < fit.smd_before
    assert 0.0 <= fit.unmatched_share < 0.2


def test_synthetic_control_reports_its_pre_and_post_launch_rmspe():
    # RMSPE = sqrt(mean gap^2) over the pre- and post-launch days, the gap being the
    # launched pools' user-weighted series minus the weighted donors (Abadie et al. 2010);
    # recomputed from the weights of the same constrained least squares.
    from spillgauge.estimators.launch import group_series, pool_day_series

    panel, schedule, _ = launch_world(rng=np.random.default_rng(4), lift=0.3)
    series, users, launched, n_pre = pool_day_series(panel, schedule, "test")
    target = group_series(series, users, launched)
    weights = synthetic_control_weights(target[:n_pre], series[~launched][:, :n_pre])
    gaps = target - weights @ series[~launched]
    fit = synthetic_control(panel, schedule).diagnostic
    assert fit.pre_rmspe == pytest.approx(np.sqrt(np.mean(gaps[:n_pre] ** 2)))
    assert fit.post_rmspe == pytest.approx(np.sqrt(np.mean(gaps[n_pre:] ** 2)))
    assert fit.post_rmspe > 2 * fit.pre_rmspe  # a 30% lift shows after the launch


def test_a_launch_diagnostic_survives_the_replication_record():
    diagnostic = LaunchDiagnostic(smd_before=0.8, smd_after=0.01, off_support_share=0.02,
                                  unmatched_share=0.03)
    run = DesignRun(estimate=Estimate(1.0, 0.1, 0.8, 1.2, "m", n_units=5,
                                      diagnostic=diagnostic), n_randomized=5, truth=1.1)
    again = DesignRun.from_record(run.to_record())
    for name in ("smd_before", "smd_after", "off_support_share", "unmatched_share"):
        assert getattr(again.estimate.diagnostic, name) == getattr(diagnostic, name)
    assert math.isnan(again.estimate.diagnostic.pre_rmspe)
