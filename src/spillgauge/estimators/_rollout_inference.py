"""The staggered rollout's small-sample variance under its working model (private).

:func:`working_model` fits each pool's working covariance (a Poisson log-linear
level with a random pool level shared by the pool's periods);
:func:`small_sample_correction` turns it into the factor and degrees of freedom
of the pool-clustered variance.
"""

from __future__ import annotations

import numpy as np

__all__ = ["small_sample_correction", "working_model"]


def working_model(rates: np.ndarray, users: np.ndarray, lengths: np.ndarray,
                   treated: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Return the working covariance of each pool's rates: (noise, loadings, pool variance).

    Working model (Poisson log-linear, with a random pool level): pool ``p``'s rate in
    period ``k`` is ``y_pk = a_p g_pk + e_pk`` with ``g_pk = abar b_k (1 + r D_pk)``
    the market's level in period ``k`` for the pool's arm, ``a_p`` the pool's relative
    level (mean 1, variance ``s_a^2``) shared by all its periods, and independent
    ``e_pk`` of variance ``s_e^2 mu_pk / (N_p L_k)`` (Poisson counts over ``N_p L_k``
    user-ticks, ``mu_pk = alpha_p g_pk / abar``). So
    ``Cov(y_p) = s_a^2 g_p g_p' + diag(noise_p)``. ``alpha_p, b_k, r`` are the Poisson
    maximum-likelihood fit of ``log mu_pk = log alpha_p + log b_k + log(1 + r D_pk)``
    (cyclic score equations, each solved exactly), ``s_e^2`` the Pearson dispersion,
    and ``s_a^2`` the spread of ``alpha_p / abar`` less its Poisson part (moments,
    floored at 0).
    """
    n_pools, n_periods = rates.shape
    exposure = users[:, None] * lengths[None, :]
    on = treated.astype(float)
    level = users @ rates / users.sum()
    alpha, lift = np.ones(n_pools), 1.0
    for _ in range(100):
        multiplier = 1.0 + (lift - 1.0) * on
        previous = (alpha, level, lift)
        alpha = _ratio((rates * lengths).sum(axis=1), (level * lengths * multiplier).sum(axis=1))
        level = _ratio(users @ rates, (users[:, None] * alpha[:, None] * multiplier).sum(axis=0))
        if on.any():
            lift = float(_ratio(np.sum(exposure * on * rates),
                                np.sum(exposure * on * np.outer(alpha, level))))
        change = max(np.max(np.abs(alpha - previous[0])), np.max(np.abs(level - previous[1])),
                     abs(lift - previous[2]))
        if change <= 1e-10 * max(np.max(alpha), np.max(level), 1.0):
            break
    multiplier = 1.0 + (lift - 1.0) * on
    mean = np.outer(alpha, level) * multiplier
    abar = float(users @ alpha / users.sum())
    loadings = abar * level[None, :] * multiplier
    # parameters: alpha (pools) and b (periods) up to one common scale, and r when fitted
    residual_df = n_pools * n_periods - n_pools - n_periods + 1 - float(on.any())
    fitted = mean > 0
    pearson = np.sum((rates - mean)[fitted] ** 2 * exposure[fitted] / mean[fitted])
    dispersion = pearson / residual_df if residual_df > 0 and fitted.any() else 1.0
    # a cell fitted at 0 (a pool or period without orders) keeps the mean fitted level
    floor = float(np.mean(mean[fitted])) if fitted.any() else 1.0
    noise = dispersion * np.where(fitted, mean, floor) / exposure
    pool_variance = 0.0
    if abar > 0 and n_pools > 1:
        # Var(alpha_p / abar) from the pool's own counts: (alpha_p / abar) / sum_k N_p L_k g_pk
        own = dispersion * _ratio(alpha / abar, (exposure * loadings).sum(axis=1))
        pool_variance = max(float(np.var(alpha / abar, ddof=1) - np.mean(own)), 0.0)
    return noise, loadings, pool_variance


def _ratio(numerator, denominator):
    """Elementwise ``numerator / denominator`` with 0 where the denominator is 0."""
    numerator, denominator = np.asarray(numerator, float), np.asarray(denominator, float)
    shape = np.broadcast(numerator, denominator).shape
    return np.divide(numerator, denominator, out=np.zeros(shape), where=denominator > 0)


def small_sample_correction(theta: np.ndarray, psi_maps: np.ndarray, noise: np.ndarray,
                             loadings: np.ndarray, pool_variance: float) -> tuple[float, float]:
    """Return the factor making ``sum psi_p^2`` unbiased, and its Satterthwaite df.

    Under the working model ``Cov(y_q) = s_a^2 g_q g_q' + diag(noise_q)`` (pools
    independent, periods of one pool correlated through its level), the point
    ``sum theta_qk y_qk`` has variance ``V = sum_q theta_q' Cov(y_q) theta_q`` and the
    pool contributions ``psi = sum_k R_k y_k`` have covariance
    ``C = sum_k R_k diag(noise_k) R_k' + s_a^2 G G'`` with ``G_pq = sum_k R_k[p, q] g_qk``;
    ``V / tr C`` times ``sum psi_p^2`` is unbiased under it, with degrees of freedom
    ``(tr C)^2 / ||C||_F^2`` (Bell & McCaffrey 2002; Pustejovsky & Tipton 2018).
    Returns NaN when ``tr C`` vanishes.
    """
    target = float(np.sum(theta ** 2 * noise)) + pool_variance * float(
        np.sum(np.sum(theta * loadings, axis=1) ** 2))
    covariance = np.einsum("kpq,qk,krq->pr", psi_maps, noise, psi_maps)
    if pool_variance > 0:
        shared = np.einsum("kpq,qk->pq", psi_maps, loadings)
        covariance += pool_variance * shared @ shared.T
    trace = float(np.trace(covariance))
    if not trace > 1e-12 * target:
        return float("nan"), float("nan")
    return target / trace, trace ** 2 / float(np.sum(covariance ** 2))

