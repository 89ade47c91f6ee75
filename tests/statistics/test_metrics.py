"""Tests of spillgauge.statistics.metrics against published values, scipy and statsmodels."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats
from statsmodels.stats.power import NormalIndPower, TTestIndPower

from spillgauge.statistics.metrics import (
    DesignMetrics,
    Retrodesign,
    design_metrics,
    minimum_detectable_effect,
    retrodesign,
)

Z_975 = stats.norm.ppf(0.975)


# --- retrodesign: closed form --------------------------------------------------------

# Gelman & Carlin (2014) retrodesign, df = inf closed form; values from REFERENCES.md
# section 8 table and check 19. Tolerances are half a unit in the last printed digit.
@pytest.mark.parametrize(("effect", "se", "power", "type_s", "exaggeration", "exag_tol"), [
    (2.0, 8.1, 0.057013, 0.239618, 9.53663, 5e-5),
    (0.1, 3.3, 0.050105, 0.464638, 77.157, 5e-4),
    (1.0, 1.0, 0.170075, 0.009045, 2.490928, 5e-7),
    (2.8016, 1.0, 0.800005, 1e-6, 1.124909, 5e-7),
])
def test_retrodesign_matches_published_table(effect, se, power, type_s, exaggeration, exag_tol):
    r = retrodesign(effect, se)
    assert isinstance(r, Retrodesign)
    assert r.power == pytest.approx(power, abs=5e-7)
    assert r.type_s == pytest.approx(type_s, abs=5e-7)
    assert r.exaggeration == pytest.approx(exaggeration, abs=exag_tol)


@pytest.mark.parametrize(("effect", "se", "alpha"), [(2.0, 8.1, 0.05), (1.0, 1.0, 0.05),
                                                      (0.7, 0.4, 0.10), (3.0, 1.0, 0.01)])
def test_retrodesign_matches_numerical_integration(effect, se, alpha):
    # Independent check: integrate the normal density of the estimate over the
    # rejection region (definition of Gelman & Carlin 2014) with scipy.integrate.quad.
    cut = stats.norm.ppf(1 - alpha / 2) * se
    density = stats.norm(effect, se).pdf
    opts = dict(epsabs=1e-13, epsrel=1e-12, limit=200)
    p_hi = integrate.quad(density, cut, np.inf, **opts)[0]
    p_lo = integrate.quad(density, -np.inf, -cut, **opts)[0]
    abs_hi = integrate.quad(lambda x: x * density(x), cut, np.inf, **opts)[0]
    abs_lo = integrate.quad(lambda x: -x * density(x), -np.inf, -cut, **opts)[0]
    power = p_hi + p_lo
    r = retrodesign(effect, se, alpha=alpha)
    assert r.power == pytest.approx(power, rel=1e-8)
    assert r.type_s == pytest.approx(p_lo / power, rel=1e-6, abs=1e-12)
    assert r.exaggeration == pytest.approx((abs_hi + abs_lo) / power / effect, rel=1e-8)


def test_retrodesign_is_symmetric_in_the_sign_of_the_effect():
    # Errors are measured relative to the true effect's sign (Gelman & Carlin 2014).
    assert retrodesign(-1.0, 1.0) == retrodesign(1.0, 1.0)


def test_retrodesign_zero_effect_has_power_alpha_and_undefined_errors():
    # Under the null the two-sided test rejects with probability alpha (definition).
    r = retrodesign(0.0, 2.0, alpha=0.1)
    assert r.power == pytest.approx(0.1, rel=1e-12)
    assert math.isnan(r.type_s) and math.isnan(r.exaggeration)


@pytest.mark.parametrize(("effect", "se", "alpha", "match"), [
    (1.0, 0.0, 0.05, "standard_error"), (1.0, -1.0, 0.05, "standard_error"),
    (1.0, math.nan, 0.05, "standard_error"), (math.inf, 1.0, 0.05, "true_effect"),
    (1.0, 1.0, 1.5, "alpha"),
])
def test_retrodesign_refuses_bad_input(effect, se, alpha, match):
    with pytest.raises(ValueError, match=match):
        retrodesign(effect, se, alpha=alpha)


# --- minimum detectable effect -------------------------------------------------------

def test_mde_multiplier():
    # REFERENCES.md check 21: z_0.975 + z_0.8 = 2.801585 [CALC].
    assert minimum_detectable_effect(1.0) == pytest.approx(2.801585, abs=5e-7)
    se = np.array([0.5, 2.0])
    np.testing.assert_allclose(minimum_detectable_effect(se), 2.801585 * se, atol=1e-6)


def test_mde_has_the_requested_power():
    # At the MDE the two-sided z-test has power 0.8 plus the far tail: REFERENCES.md
    # section 8 table, (A, s) = (2.8016, 1) -> power 0.800005.
    mde = minimum_detectable_effect(0.3, alpha=0.05, power=0.8)
    assert retrodesign(mde, 0.3).power == pytest.approx(0.8, abs=1e-5)
    # statsmodels NormalIndPower with one sample (ratio=0) solves the same power equation.
    d = minimum_detectable_effect(1.0, alpha=0.05, power=0.9) / math.sqrt(50)
    solved = NormalIndPower().power(d, 50, 0.05, ratio=0)
    assert solved == pytest.approx(0.9, abs=1e-4)


# --- design_metrics: Monte Carlo agreement with closed forms --------------------------

def _normal_replications(effect, se, n_reps, seed):
    rng = np.random.default_rng(seed)
    est = rng.normal(effect, se, n_reps)
    return est, np.full(n_reps, se), est - Z_975 * se, est + Z_975 * se, np.full(n_reps, effect)


@pytest.mark.parametrize(("effect", "se", "seed"), [(1.0, 1.0, 11), (2.0, 8.1, 12),
                                                     (-0.5, 0.25, 13)])
def test_simulated_type_s_and_m_agree_with_retrodesign(effect, se, seed):
    # Gelman & Carlin (2014): simulated power, Type S and exaggeration of normal
    # estimates with 95% z intervals agree with the closed form within 4 MC SE.
    m = design_metrics(*_normal_replications(effect, se, 200_000, seed))
    r = retrodesign(effect, se)
    assert m.n_reps == 200_000 and m.n_dropped == 0
    assert abs(m.power - r.power) <= 4 * m.power_se
    assert abs(m.type_s - r.type_s) <= 4 * m.type_s_se
    assert abs(m.type_m - r.exaggeration) <= 4 * m.type_m_se
    assert abs(m.bias) <= 4 * m.bias_se
    assert abs(m.sd - se) <= 4 * m.sd_se
    assert abs(m.rmse - se) <= 4 * m.rmse_se
    assert m.mean_se == pytest.approx(se) and m.ci_width == pytest.approx(2 * Z_975 * se)


def test_coverage_is_nominal_for_an_unbiased_normal_design():
    # A 95% z interval around an unbiased normal estimate covers with probability 0.95;
    # checked with scipy.stats.binomtest (STYLE.md section 8).
    m = design_metrics(*_normal_replications(0.3, 0.2, 200_000, 21))
    n_covered = round(m.coverage * m.n_reps)
    assert stats.binomtest(n_covered, m.n_reps, 0.95).pvalue > 1e-3
    assert m.coverage_se == pytest.approx(math.sqrt(m.coverage * (1 - m.coverage) / m.n_reps))


def test_coverage_uses_each_replications_own_gte():
    # Estimates centred on a per-replication GTE that varies a lot: coverage against the
    # replication's own GTE stays at 0.95 (binomtest), against the mean GTE it would not.
    rng = np.random.default_rng(22)
    n = 50_000
    gte = rng.normal(1.0, 3.0, n)
    est = gte + rng.normal(0.0, 0.5, n)
    m = design_metrics(est, np.full(n, 0.5), est - Z_975 * 0.5, est + Z_975 * 0.5, gte)
    assert stats.binomtest(round(m.coverage * n), n, 0.95).pvalue > 1e-3
    assert abs(m.bias) <= 4 * m.bias_se


def test_power_matches_statsmodels_normal_two_sample_z_test():
    # statsmodels NormalIndPower().power(0.1, 1000, 0.05) = 0.608779 (REFERENCES.md
    # check 20). Simulate two arms of 1000 N(0,1) / N(0.1,1) users exactly through their
    # sufficient statistics (sample mean ~ normal, sample variance ~ scaled chi-square)
    # and test with the estimated Neyman SE.
    assert NormalIndPower().power(0.1, 1000, 0.05) == pytest.approx(0.608779, rel=1e-4)
    rng = np.random.default_rng(31)
    n_reps, n = 50_000, 1000
    means = rng.normal([0.1, 0.0], 1 / math.sqrt(n), (n_reps, 2))
    variances = rng.chisquare(n - 1, (n_reps, 2)) / (n - 1)
    est = means[:, 0] - means[:, 1]
    se = np.sqrt(variances.sum(axis=1) / n)
    m = design_metrics(est, se, est - Z_975 * se, est + Z_975 * se, 0.1)
    assert abs(m.power - NormalIndPower().power(0.1, n, 0.05)) <= 4 * m.power_se


def test_power_matches_statsmodels_pooled_t_test():
    # statsmodels TTestIndPower().power(0.5, 64, 0.05) = 0.801460 (REFERENCES.md check 20):
    # pooled-variance t interval with df = 126, simulated exactly as above.
    assert TTestIndPower().power(0.5, 64, 0.05) == pytest.approx(0.801460, rel=1e-4)
    rng = np.random.default_rng(32)
    n_reps, n = 50_000, 64
    est = rng.normal(0.5, math.sqrt(2 / n), n_reps)
    pooled = rng.chisquare(2 * n - 2, n_reps) / (2 * n - 2)
    se = np.sqrt(pooled * 2 / n)
    t = stats.t.ppf(0.975, 2 * n - 2)
    m = design_metrics(est, se, est - t * se, est + t * se, 0.5)
    assert abs(m.power - TTestIndPower().power(0.5, n, 0.05)) <= 4 * m.power_se


# --- design_metrics: hand-worked cases ----------------------------------------------

def test_hand_worked_small_case():
    # Hand-worked: estimates (1, 2, 4), GTE (1, 1, 2) -> errors (0, 1, 2).
    est = np.array([1.0, 2.0, 4.0])
    gte = np.array([1.0, 1.0, 2.0])
    low = np.array([0.5, -0.5, 2.5])
    high = np.array([1.5, 2.5, 5.5])
    se = np.array([0.25, 0.75, 0.75])
    m = design_metrics(est, se, low, high, gte)
    assert m.mean_estimate == pytest.approx(7 / 3)
    assert m.bias == pytest.approx(1.0)                      # mean(0, 1, 2)
    assert m.bias_se == pytest.approx(1 / math.sqrt(3))      # sd(0, 1, 2) = 1
    assert m.relative_bias == pytest.approx(1.0 / (4 / 3))   # bias / mean GTE
    assert m.sd == pytest.approx(math.sqrt(7 / 3))           # var(1, 2, 4) = 7/3
    assert m.sd_se == pytest.approx(math.sqrt(7 / 3) / 2)    # sd / sqrt(2 (n - 1))
    assert m.rmse == pytest.approx(math.sqrt(5 / 3))         # sqrt((0 + 1 + 4) / 3)
    # sd of squared errors (0, 1, 4) is sqrt(13/3); delta method / (2 rmse sqrt(n)).
    assert m.rmse_se == pytest.approx(math.sqrt(13 / 3) / (2 * math.sqrt(5 / 3) * math.sqrt(3)))
    assert m.coverage == pytest.approx(2 / 3)                # third CI (2.5, 5.5) misses 2
    assert m.ci_width == pytest.approx(7 / 3)                # widths 1, 3, 3
    assert m.power == pytest.approx(2 / 3)                   # second CI contains 0
    assert m.n_significant == 2
    assert m.type_s == 0.0                                   # both significant are positive
    assert m.type_m == pytest.approx(2.5 / (4 / 3))          # mean(1, 4) / mean GTE
    assert m.type_m_se == pytest.approx(math.sqrt(4.5) / (4 / 3) / math.sqrt(2))
    assert m.mean_se == pytest.approx(7 / 12)


def test_type_s_counts_significant_estimates_of_the_wrong_sign():
    # Hand-worked: GTE +1; significant estimates +2, -1.5, +3 -> one of three wrong.
    est = np.array([2.0, -1.5, 3.0, 0.1])
    m = design_metrics(est, np.full(4, 0.5), est - 1, est + 1, np.ones(4))
    assert m.n_significant == 3
    assert m.type_s == pytest.approx(1 / 3)
    assert m.type_s_se == pytest.approx(math.sqrt((1 / 3) * (2 / 3) / 3))
    assert m.type_m == pytest.approx((2 + 1.5 + 3) / 3)


def test_relative_bias_se_matches_delta_method_by_simulation():
    # The delta-method SE of bias / mean GTE should match the spread of the ratio over
    # independent studies (common practice check, no source): 400 studies of 500 reps.
    rng = np.random.default_rng(41)
    gte = rng.normal(2.0, 0.5, (400, 500))
    est = 1.2 * gte + rng.normal(0.0, 1.0, (400, 500))
    ratios, ses = [], []
    for g, e in zip(gte, est):
        m = design_metrics(e, np.ones_like(e), e - 2, e + 2, g)
        ratios.append(m.relative_bias)
        ses.append(m.relative_bias_se)
    spread = np.std(ratios, ddof=1)
    # The SD of 400 draws has relative MC SE about 1/sqrt(2 * 399) = 3.5%; allow 4 SE.
    assert np.mean(ses) == pytest.approx(spread, rel=4 / math.sqrt(2 * 399))


# --- NaN handling and validation ---------------------------------------------------

def test_nan_replications_are_dropped_and_counted():
    est = np.array([1.0, np.nan, 2.0, 3.0])
    se = np.array([0.5, 0.5, np.nan, 0.5])
    m = design_metrics(est, se, est - 1, est + 1, np.full(4, 2.0))
    clean = design_metrics(est[[0, 3]], se[[0, 3]], est[[0, 3]] - 1, est[[0, 3]] + 1, [2.0, 2.0])
    assert m.n_reps == 2 and m.n_dropped == 2 and m.n_estimates == 3
    assert m.usable_share == 0.5 and m.usable_share_se == pytest.approx(0.25)  # sqrt(.5*.5/4)
    # The interval metrics are those of the two replications with an interval ...
    interval = ("coverage", "coverage_se", "ci_width", "ci_width_se", "power", "power_se",
                "mean_se", "mean_se_se", "n_significant")
    assert {k: m.to_dict()[k] for k in interval} == pytest.approx(
        {k: clean.to_dict()[k] for k in interval}, nan_ok=True)
    # ... the point metrics those of the three finite estimates, the one without a standard
    # error included (leaving it out would select on its noise).
    kept = [0, 2, 3]
    points = design_metrics(est[kept], [0.5] * 3, est[kept] - 1, est[kept] + 1, [2.0] * 3)
    point = ("mean_estimate", "mean_estimate_se", "bias", "bias_se", "sd", "sd_se", "rmse",
             "rmse_se", "error_sd", "error_sd_se", "relative_bias", "relative_bias_se")
    assert {k: m.to_dict()[k] for k in point} == pytest.approx(
        {k: points.to_dict()[k] for k in point}, nan_ok=True)
    assert m.bias == pytest.approx(0.0) and m.rmse == pytest.approx(math.sqrt(2 / 3))


def test_all_nan_gives_nan_metrics():
    nan = np.full(3, np.nan)
    m = design_metrics(nan, nan, nan, nan, np.ones(3))
    d = m.to_dict()
    assert d["n_reps"] == 0 and d["n_dropped"] == 3 and d["n_significant"] == 0
    assert d["usable_share"] == 0.0
    assert all(math.isnan(v) for k, v in d.items()
               if not k.startswith(("n_", "usable_share")))


def test_zero_mean_gte_leaves_ratio_metrics_undefined():
    est = np.array([-1.0, 1.0, 3.0])
    m = design_metrics(est, np.full(3, 0.1), est - 0.2, est + 0.2, np.zeros(3))
    assert m.bias == pytest.approx(1.0)
    assert all(math.isnan(x) for x in (m.relative_bias, m.type_s, m.type_m, m.type_m_se))


def test_no_significant_replication_leaves_type_s_and_m_undefined():
    est = np.array([0.1, -0.1, 0.2])
    m = design_metrics(est, np.ones(3), est - 2, est + 2, np.full(3, 0.1))
    assert m.power == 0.0 and m.n_significant == 0
    assert math.isnan(m.type_s) and math.isnan(m.type_m)


def test_to_dict_gives_plain_python_numbers():
    est = np.array([1.0, 2.0])
    d = design_metrics(est, np.ones(2), est - 1, est + 1, np.ones(2)).to_dict()
    assert set(d) == {f for f in DesignMetrics.__slots__}
    assert all(type(v) is (int if k.startswith("n_") else float) for k, v in d.items())


def test_design_metrics_refuses_mismatched_shapes():
    with pytest.raises(ValueError, match="ci_low"):
        design_metrics([1.0, 2.0], [1.0, 1.0], [0.0], [3.0, 3.0], 1.0)
    with pytest.raises(ValueError, match="1-D"):
        design_metrics([[1.0]], [[1.0]], [[0.0]], [[2.0]], 1.0)


def test_rounding_in_a_degenerate_world_is_not_a_miss():
    # Both arms identical (stock binds everywhere): the estimate and its SE are 0 up to
    # rounding, and an interval [-2e-16, 1e-18] must cover a GTE of exactly 0. Hand-worked.
    m = design_metrics([1e-17, -3e-17], [1e-17, 1e-17], [-2e-16, -2e-16], [1e-18, -1e-18],
                       [0.0, 0.0], outcome_scale=7.0)
    assert m.coverage == 1.0 and m.power == 0.0


def test_relative_bias_is_undefined_when_the_gte_is_within_noise_of_zero():
    # GTE values with mean 0.001 and SD 0.1 over 4 replications: 2 MC SE = 0.1 > 0.001.
    gte = np.array([0.1, -0.1, 0.1, -0.096])
    m = design_metrics(gte + 0.05, [0.1] * 4, gte - 0.2, gte + 0.3, gte)
    assert math.isnan(m.relative_bias) and math.isnan(m.type_s)
    assert m.bias == pytest.approx(0.05)


def test_error_sd_ignores_gte_movement():
    # Each estimate misses its own replication's GTE by the same amount: the errors have
    # no spread even though the estimates (and the GTEs) move. Hand-worked.
    gte = np.array([1.0, 1.5, 0.5, 1.2])
    m = design_metrics(gte + 0.1, [0.2] * 4, gte - 0.3, gte + 0.5, gte)
    assert m.error_sd == pytest.approx(0.0, abs=1e-12)
    assert m.sd == pytest.approx(np.std(gte, ddof=1))
