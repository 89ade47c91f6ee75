"""Synthetic difference in differences against independent computations of the same problems.

The weights' quadratic programs are solved again by a general-purpose solver
(scipy.optimize.minimize, SLSQP, with the intercepts as free variables), and the
estimate is the launch coefficient of the weighted two-way fixed-effects regression
fitted by statsmodels' WLS (Arkhangelsky, Athey, Hirshberg, Imbens & Wager 2021,
AER 111(12), eqs. 1.1, 2.2, 2.3 and Algorithm 1).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import optimize

from spillgauge.estimators.launch import group_series, pool_day_series
from spillgauge.estimators.synthetic_did import (
    synthetic_did_fit,
    synthetic_did_jackknife_variance,
    synthetic_did_regularization,
    synthetic_did_time_weights,
    synthetic_did_unit_weights,
    synthetic_difference_in_differences,
)
from tests.calibration.launch_worlds import launch_world


def _slsqp(loss, n_weights: int):
    """Minimise loss(intercept, w) over a free intercept and w in the simplex (SLSQP)."""
    start = np.concatenate([[0.0], np.full(n_weights, 1 / n_weights)])
    result = optimize.minimize(
        lambda v: loss(v[0], v[1:]), start, method="SLSQP",
        bounds=[(None, None)] + [(0, None)] * n_weights,
        constraints=[{"type": "eq", "fun": lambda v: v[1:].sum() - 1}],
        options={"ftol": 1e-15, "maxiter": 2000})
    return result.x[0], result.x[1:]


def _panel(seed: int, **world):
    rng = np.random.default_rng(seed)
    return launch_world(rng=rng, n_pools=14, launched=3, days=16, launch_day=10,
                        factor_sd=0.05, **world)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_unit_weights_equal_an_independent_solution_of_the_paper_loss(seed):
    # l_unit(w0, w) = sum_t (w0 + sum_i w_i Y_it - y_t)^2 + zeta^2 T_pre ||w||^2, w in the
    # simplex (Arkhangelsky et al. 2021, eq. 2.2), solved by SLSQP with w0 free.
    rng = np.random.default_rng(seed)
    donors = rng.gamma(4.0, 0.5, size=(9, 12)) + np.linspace(0, 1, 12)
    target = 0.5 * donors[2] + 0.5 * donors[6] + 0.7 + rng.normal(0, 0.2, 12)
    zeta = 0.3
    intercept, weights = synthetic_did_unit_weights(target, donors, zeta)

    def loss(w0, w):
        return np.sum((w0 + w @ donors - target) ** 2) + zeta ** 2 * 12 * np.sum(w ** 2)

    ref_intercept, ref_weights = _slsqp(loss, 9)
    np.testing.assert_allclose(weights, ref_weights, atol=1e-5)
    assert intercept == pytest.approx(ref_intercept, abs=1e-4)
    assert loss(intercept, weights) <= loss(ref_intercept, ref_weights) + 1e-9


@pytest.mark.parametrize("seed", [3, 4])
def test_time_weights_equal_an_independent_solution_of_the_paper_loss(seed):
    # l_time(l0, l) = sum_i (l0 + sum_t l_t Y_it - mean_post Y_i)^2 over the other units,
    # l in the simplex (Arkhangelsky et al. 2021, eq. 2.3), solved by SLSQP with l0 free.
    rng = np.random.default_rng(seed)
    pre = rng.gamma(4.0, 0.5, size=(20, 8)) * np.linspace(1, 1.4, 8)
    post = pre[:, -3:].mean(axis=1, keepdims=True) * 1.1 + rng.normal(0, 0.1, (20, 4))
    intercept, weights = synthetic_did_time_weights(pre, post)

    def loss(l0, lam):
        return np.sum((l0 + pre @ lam - post.mean(axis=1)) ** 2)

    ref_intercept, ref_weights = _slsqp(loss, 8)
    np.testing.assert_allclose(weights, ref_weights, atol=1e-5)
    assert intercept == pytest.approx(ref_intercept, abs=1e-4)


def test_regularization_is_the_papers_formula_by_hand():
    # zeta = (N_tr T_post)^(1/4) sigma, sigma^2 = mean squared deviation of the controls'
    # pre-period first differences (Arkhangelsky et al. 2021, Algorithm 1, step 1).
    donors = np.array([[1.0, 3.0, 2.0, 5.0], [0.0, 0.0, 1.0, 1.0]])
    differences = np.array([2.0, -1.0, 3.0, 0.0, 1.0, 0.0])
    sigma = np.sqrt(np.mean((differences - differences.mean()) ** 2))
    assert synthetic_did_regularization(donors, 3, 27) == pytest.approx(81 ** 0.25 * sigma)


@pytest.mark.parametrize("seed", [5, 6])
def test_estimate_equals_the_weighted_two_way_fixed_effects_regression(seed):
    # tau is the launch coefficient of Y_it ~ mu + alpha_i + beta_t + tau W_it fitted with
    # weights omega_i lambda_t (Arkhangelsky et al. 2021, eq. 1.1): launched pools weighted by
    # their users' shares, post-launch days by 1 / T_post. Reference: statsmodels WLS on
    # unit and day dummies.
    panel, schedule, _ = _panel(seed, lift=0.1)
    series, users, launched, n_pre = pool_day_series(panel, schedule, "test")
    tau, omega, lam = synthetic_did_fit(series, users, launched, n_pre)
    n_units, n_days = series.shape
    unit_weight = np.zeros(n_units)
    unit_weight[~launched] = omega
    unit_weight[launched] = users[launched] / users[launched].sum()
    day_weight = np.concatenate([lam, np.full(n_days - n_pre, 1 / (n_days - n_pre))])
    reference, rank, columns = _weighted_twfe_fit(series, unit_weight, day_weight, launched,
                                                  n_pre)
    assert rank == columns
    assert tau == pytest.approx(reference, abs=1e-8)
    # and the estimator scales it to orders per user over the post-launch days
    estimate = synthetic_difference_in_differences(panel, schedule)
    assert estimate.point == pytest.approx(tau * (n_days - n_pre))


def test_placebo_variance_enumerates_every_set_when_few():
    # With 7 other pools and 2 launched there are C(7, 2) = 21 placebo launches, fewer than
    # the 200 cap: the variance is the plain population variance of the 21 placebo estimates
    # (Arkhangelsky et al. 2021, Algorithm 4), recomputed here by a loop over
    # itertools.combinations.
    rng = np.random.default_rng(9)
    panel, schedule, _ = launch_world(rng=rng, n_pools=9, launched=2, days=12, launch_day=8)
    series, users, launched, n_pre = pool_day_series(panel, schedule, "test")
    controls = np.flatnonzero(~launched)
    placebo = []
    for members in itertools.combinations(range(controls.size), 2):
        fake = np.zeros(controls.size, dtype=bool)
        fake[list(members)] = True
        placebo.append(synthetic_did_fit(series[controls], users[controls], fake, n_pre)[0] * 4)
    estimate = synthetic_difference_in_differences(panel, schedule)
    assert estimate.standard_error == pytest.approx(np.std(placebo), rel=1e-9)


def test_noiseless_parallel_series_give_the_effect_exactly():
    # Every pool's per-user series is its level plus a common path (parallel trends, no
    # noise); the launched pools gain 0.5 per day after the launch. Any weights give the same
    # double difference, 0.5 x 4 post days = 2 (worked by hand).
    from tests.estimators.test_launch import _pool_total_panel

    rng = np.random.default_rng(2)
    path = np.cumsum(rng.normal(0, 0.1, 10)) + 3
    levels = np.linspace(0.5, 2.0, 9)
    series = levels[:, None] + path[None, :]
    launched = np.zeros(9, dtype=bool)
    launched[[1, 4]] = True
    series[launched, 6:] += 0.5
    panel, schedule = _pool_total_panel(series, launched, 6)
    estimate = synthetic_difference_in_differences(panel, schedule)
    assert estimate.point == pytest.approx(2.0, abs=0.01)
    assert group_series(series, np.ones(9), launched)[7] == pytest.approx(
        levels[[1, 4]].mean() + path[7] + 0.5)


def _weighted_twfe_tau(series, unit_weight, day_weight, treated_units, n_pre):
    """Launch coefficient of Y_it ~ alpha_i + beta_t + tau W_it, WLS weights w_i l_t (statsmodels)."""
    return _weighted_twfe_fit(series, unit_weight, day_weight, treated_units, n_pre)[0]


def _weighted_twfe_fit(series, unit_weight, day_weight, treated_units, n_pre):
    """Return that coefficient, the rank of the dummy design and its number of columns."""
    import statsmodels.api as sm

    n_units, n_days = series.shape
    unit, day = np.meshgrid(np.arange(n_units), np.arange(n_days), indexing="ij")
    treated = (treated_units[unit] & (day >= n_pre)).astype(float).ravel()
    weight = (unit_weight[unit] * day_weight[day]).ravel()
    keep = weight > 0  # zero-weight cells drop out; so do their units' and days' dummies
    units = np.eye(n_units)[unit.ravel()][keep][:, unit_weight > 0]
    days = np.eye(n_days)[day.ravel()][keep][:, day_weight > 0][:, 1:]
    design = np.column_stack([treated[keep], units, days])
    tau = sm.WLS(series.ravel()[keep], design, weights=weight[keep]).fit().params[0]
    return tau, np.linalg.matrix_rank(design), design.shape[1]


@pytest.mark.parametrize("seed", [7, 8])
def test_jackknife_variance_equals_a_plain_leave_one_pool_out_loop(seed):
    # Arkhangelsky et al. (2021), Algorithm 3 [text from memory]: for every unit i, tau^(-i)
    # is the weighted two-way fixed-effects estimate (their eq. 1.1) without unit i, with the
    # time weights kept and the other units' weights renormalised; V = (N - 1) / N
    # sum_i (tau^(-i) - tau)^2. Here each tau^(-i) is refitted by statsmodels' WLS on unit and
    # day dummies, in a plain loop over pools.
    panel, schedule, _ = _panel(seed, lift=0.05)
    series, users, launched, n_pre = pool_day_series(panel, schedule, "test")
    tau, omega, lam = synthetic_did_fit(series, users, launched, n_pre)
    n_units, n_days = series.shape
    unit_weight = np.zeros(n_units)
    unit_weight[~launched] = omega
    unit_weight[launched] = users[launched]
    day_weight = np.concatenate([lam, np.full(n_days - n_pre, 1 / (n_days - n_pre))])
    leave_one_out = []
    for i in range(n_units):
        kept = np.arange(n_units) != i
        w = unit_weight[kept].copy()
        is_launched = launched[kept]
        w[is_launched] /= w[is_launched].sum()
        w[~is_launched] /= w[~is_launched].sum()
        leave_one_out.append(_weighted_twfe_tau(series[kept], w, day_weight, is_launched, n_pre))
    expected = (n_units - 1) / n_units * np.sum((np.array(leave_one_out) - tau) ** 2)
    variance = synthetic_did_jackknife_variance(series, users, launched, n_pre, omega, lam)
    assert variance == pytest.approx(expected, rel=1e-8)
    estimate = synthetic_difference_in_differences(panel, schedule, variance="jackknife")
    n_post = n_days - n_pre
    assert estimate.standard_error == pytest.approx(np.sqrt(expected) * n_post, rel=1e-8)
    assert estimate.point == pytest.approx(tau * n_post)
    # the interval is Student's t with N_tr - 1 df (3 launched pools here)
    assert estimate.degrees_of_freedom == 2


def test_jackknife_is_not_defined_with_one_launched_pool():
    # Arkhangelsky et al. (2021), section on Algorithm 3: leaving out the only treated unit
    # leaves no estimate, so the jackknife needs two treated units (and a donor weight that
    # survives each leave-one-out).
    import warnings

    rng = np.random.default_rng(3)
    panel, schedule, _ = launch_world(rng=rng, n_pools=10, launched=1, days=12, launch_day=8)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        estimate = synthetic_difference_in_differences(panel, schedule, variance="jackknife")
    assert np.isnan(estimate.standard_error) and caught
    with pytest.raises(ValueError, match="variance must be one of"):
        synthetic_difference_in_differences(panel, schedule, variance="bootstrap")


def test_placebo_interval_uses_t_on_the_placebo_degrees_of_freedom():
    # 7 other pools, every one of the C(7, 2) = 21 placebo sets listed: the placebo variance
    # has N_co - 1 = 6 df (placebo_degrees_of_freedom; the variance of a mean of k of n drawn
    # without replacement, Cochran 1977, eq. 2.8 [from memory]); the half-width is
    # scipy.stats.t(6).ppf(0.975) standard errors.
    from scipy import stats

    rng = np.random.default_rng(9)
    panel, schedule, _ = launch_world(rng=rng, n_pools=9, launched=2, days=12, launch_day=8)
    estimate = synthetic_difference_in_differences(panel, schedule)
    assert estimate.degrees_of_freedom == 6
    assert estimate.ci_high - estimate.point == pytest.approx(
        stats.t(6).ppf(0.975) * estimate.standard_error, rel=1e-12)
