"""The staggered rollout's pool-clustered variance, against statsmodels and by direct algebra."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.designs import draw_rollout_schedule
from spillgauge.estimators._rollout_inference import small_sample_correction, working_model
from spillgauge.estimators.rollout import _linearize


def _rollout_rates(rng, n_pools=12, waves=4, period_ticks=6):
    """Counts of a rollout with pool levels, a rhythm and a lift; return rates and inputs."""
    users = rng.integers(20, 60, n_pools).astype(float)
    schedule = draw_rollout_schedule(np.repeat(np.arange(n_pools), users.astype(int)),
                                     (waves + 1) * period_ticks, waves=waves, rng=rng)
    treated = schedule.is_treated
    lengths = schedule.period_lengths().astype(float)
    level = rng.gamma(4.0, 0.25, n_pools)[:, None] * (1 + 0.8 * np.sin(np.arange(waves + 1)))
    exposure = users[:, None] * lengths[None, :]
    counts = rng.poisson(exposure * level * (1 + 0.3 * treated))
    return counts / exposure, users, lengths, treated, counts, exposure


def test_pool_contributions_are_statsmodels_cluster_robust_scores(rng):
    # The estimate is a smooth function of weighted least-squares fits (per period: the
    # change d_pk on an intercept and the arm; the not-yet-switched pools' level; the
    # baseline level). Stacking them in one WLS with pool-clustered errors, statsmodels'
    # CR0 covariance (cov_type="cluster", use_correction=False; Liang & Zeger 1986) and the
    # delta method give sum_p psi_p^2, the quantity the small-sample factor multiplies.
    import statsmodels.api as sm

    rates, users, lengths, treated, *_ = _rollout_rates(rng)
    n_pools, n_periods = rates.shape
    horizon = lengths.sum()
    lin = _linearize(rates, users, lengths, treated, horizon)
    psi = np.einsum("kpq,qk->p", lin.psi_maps, rates)
    periods = [k for k in range(1, n_periods) if 0 < treated[:, k].sum() < n_pools]
    n_params = 3 * len(periods) + 1
    rows, y, w, groups = [], [], [], []

    def add(pool, value, columns):
        row = np.zeros(n_params)
        for c, x in columns:
            row[c] = x
        rows.append(row)
        y.append(value)
        w.append(users[pool])
        groups.append(pool)

    for j, k in enumerate(periods):
        for p in range(n_pools):
            add(p, rates[p, k] - rates[p, 0], [(3 * j, 1.0), (3 * j + 1, float(treated[p, k]))])
            if not treated[p, k]:
                add(p, rates[p, k], [(3 * j + 2, 1.0)])
    for p in range(n_pools):
        add(p, rates[p, 0], [(n_params - 1, 1.0)])
    fit = sm.WLS(np.array(y), np.array(rows), weights=np.array(w)).fit(
        cov_type="cluster", cov_kwds={"groups": np.array(groups), "use_correction": False})
    tau, level = fit.params[1:-1:3], fit.params[2:-1:3]
    base = fit.params[-1]
    used = lengths[periods]
    missing = horizon - used.sum()
    effect, control = used @ tau, used @ level
    point = effect * (1 + missing * base / control)
    assert lin.point == pytest.approx(point, rel=1e-10)
    gradient = np.zeros(n_params)                   # d point / d (intercept, tau, level) ...
    gradient[1:-1:3] = (1 + missing * base / control) * used
    gradient[2:-1:3] = -effect * missing * base / control ** 2 * used
    gradient[-1] = effect * missing / control
    assert psi @ psi == pytest.approx(gradient @ fit.cov_params() @ gradient, rel=1e-9)


def test_working_model_is_the_poisson_log_linear_fit(rng):
    # The working model's levels are the Poisson maximum-likelihood fit of
    # log mu = pool + period + arm with log exposure as offset (McCullagh & Nelder 1989,
    # Poisson log-linear models); statsmodels' GLM is the reference, and the Pearson
    # dispersion is its pearson_chi2 / df_resid.
    import statsmodels.api as sm

    rates, users, lengths, treated, counts, exposure = _rollout_rates(rng)
    n_pools, n_periods = rates.shape
    pool = np.repeat(np.arange(n_pools), n_periods)
    period = np.tile(np.arange(n_periods), n_pools)
    design = np.column_stack([pool == p for p in range(n_pools)]
                             + [period == k for k in range(1, n_periods)]
                             + [treated.ravel()]).astype(float)
    fit = sm.GLM(counts.ravel(), design, family=sm.families.Poisson(),
                 offset=np.log(exposure.ravel())).fit()
    mean = (fit.mu / exposure.ravel()).reshape(n_pools, n_periods)
    dispersion = fit.pearson_chi2 / fit.df_resid
    noise, loadings, pool_variance = working_model(rates, users, lengths, treated)
    np.testing.assert_allclose(noise, dispersion * mean / exposure, rtol=1e-7)
    # loadings: the fitted level without the pool's own: mean / loadings is the pool's
    # relative level alpha_p / abar, the same in every period, user-weighted mean 1
    relative = mean / loadings
    np.testing.assert_allclose(relative, relative[:, :1] * np.ones(n_periods), rtol=1e-7)
    assert users @ relative[:, 0] / users.sum() == pytest.approx(1.0, rel=1e-9)
    # the pool variance: moments of the relative levels less their Poisson part, the
    # variance of sum_k L_k y_pk / sum_k L_k g_pk: relative_p / sum_k N_p L_k g_pk (on paper)
    own = dispersion * relative[:, 0] / (exposure * loadings).sum(axis=1)
    expected = np.var(relative[:, 0], ddof=1) - np.mean(own)
    assert pool_variance == pytest.approx(max(expected, 0.0), rel=1e-6)
    assert pool_variance > 0          # the pools' levels were drawn with CV 0.5


def test_small_sample_factor_and_df_match_the_dense_working_covariance(rng):
    # Direct algebra (Bell & McCaffrey 2002; Pustejovsky & Tipton 2018): with the working
    # covariance Omega of the stacked rates (block-diagonal by pool: s_a^2 g_p g_p' +
    # diag(noise_p)), the point theta' y has variance theta' Omega theta and the pool
    # contributions Psi y have covariance C = Psi Omega Psi'; the factor is
    # theta' Omega theta / tr C and the df (tr C)^2 / tr(C^2). Formed densely here.
    rates, users, lengths, treated, *_ = _rollout_rates(rng)
    n_pools, n_periods = rates.shape
    lin = _linearize(rates, users, lengths, treated, lengths.sum())
    noise, loadings, pool_variance = working_model(rates, users, lengths, treated)
    omega = np.zeros((n_pools * n_periods,) * 2)
    for p in range(n_pools):
        block = slice(p * n_periods, (p + 1) * n_periods)
        omega[block, block] = pool_variance * np.outer(loadings[p], loadings[p]) + np.diag(
            noise[p])
    big_psi = lin.psi_maps.transpose(1, 2, 0).reshape(n_pools, n_pools * n_periods)
    theta = lin.theta.ravel()
    c = big_psi @ omega @ big_psi.T
    factor, df = small_sample_correction(lin.theta, lin.psi_maps, noise, loadings,
                                         pool_variance)
    assert factor == pytest.approx(theta @ omega @ theta / np.trace(c), rel=1e-9)
    assert df == pytest.approx(np.trace(c) ** 2 / np.sum(c * c), rel=1e-9)
    # and the psi map is the estimator's: Psi y = psi
    np.testing.assert_allclose(big_psi @ rates.ravel(),
                               np.einsum("kpq,qk->p", lin.psi_maps, rates), rtol=1e-12)
