"""Metrics of one design over a study's replications, with Monte Carlo standard errors.

Every replication gives one estimate of the GTE, its standard error and confidence
interval, and the realised GTE of that replication (from the two truth worlds).
:func:`design_metrics` turns these into bias, SD, RMSE, CI coverage and width,
power, and the sign and magnitude errors of Gelman & Carlin (2014).
:func:`retrodesign` gives the same power, Type S and exaggeration ratio in closed
form for a normal estimate, and :func:`minimum_detectable_effect` the smallest
effect a design detects at a given power.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

__all__ = ["Retrodesign", "DesignMetrics", "retrodesign", "design_metrics",
           "minimum_detectable_effect"]


@dataclass(frozen=True, slots=True)
class Retrodesign:
    """Power and sign / magnitude errors of a normal estimate (Gelman & Carlin 2014).

    Parameters
    ----------
    power : float
        Probability that the two-sided test at ``alpha`` rejects.
    type_s : float
        Probability that a significant estimate has the wrong sign.
    exaggeration : float
        Expected ``|estimate| / |true effect|`` among significant estimates (Type M).
    """

    power: float
    type_s: float
    exaggeration: float


@dataclass(frozen=True, slots=True, kw_only=True)
class DesignMetrics:
    """Summary of one design's estimates over the replications of a study.

    All values are plain floats on the GTE's scale (orders per user), except the
    counts. A field ending in ``_se`` is the Monte Carlo standard error of the
    field it names. See :func:`design_metrics` for every formula.
    """

    n_reps: int
    n_dropped: int
    n_significant: int
    mean_estimate: float
    mean_estimate_se: float
    bias: float
    bias_se: float
    relative_bias: float
    relative_bias_se: float
    sd: float
    sd_se: float
    rmse: float
    rmse_se: float
    coverage: float
    coverage_se: float
    ci_width: float
    ci_width_se: float
    power: float
    power_se: float
    type_s: float
    type_s_se: float
    type_m: float
    type_m_se: float
    mean_se: float
    mean_se_se: float
    usable_share: float = math.nan
    usable_share_se: float = math.nan
    error_sd: float = math.nan
    error_sd_se: float = math.nan
    n_estimates: int = 0

    def to_dict(self) -> dict[str, float | int]:
        """Return the fields as a dict of plain ``int`` (counts) and ``float`` (NaN allowed).

        Examples
        --------
        >>> m = design_metrics([1.0, 3.0], [1.0, 1.0], [0.0, 2.0], [2.0, 4.0], [2.0, 2.0])
        >>> d = m.to_dict()
        >>> d["n_reps"], d["bias"], d["coverage"]
        (2, 0.0, 1.0)
        """
        out: dict[str, float | int] = {}
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            out[f.name] = int(value) if f.name.startswith("n_") else float(value)
        return out


def retrodesign(true_effect: float, standard_error: float, *,
                alpha: float = 0.05) -> Retrodesign:
    """Compute power, Type S and exaggeration of a normal estimate in closed form.

    Parameters
    ----------
    true_effect : float
        The true effect ``A`` (orders per user). Its sign does not matter: errors are
        measured relative to it.
    standard_error : float
        Standard error ``s > 0`` of the normal estimate.
    alpha : float, default 0.05
        Level of the two-sided test.

    Returns
    -------
    Retrodesign
        ``type_s`` and ``exaggeration`` are NaN when ``true_effect`` is 0.

    Raises
    ------
    ValueError
        If ``standard_error`` is not a positive finite number, ``true_effect`` is not
        finite, or ``alpha`` is not in (0, 1).

    Notes
    -----
    The ``df = inf`` case of the ``retrodesign`` function of Gelman & Carlin (2014),
    *Beyond power calculations*, Perspectives on Psychological Science 9(6):641-651,
    integrated in closed form. With ``lambda = |A|/s`` and ``z = Phi^-1(1 - alpha/2)``:

    - power = Phi(lambda - z) + Phi(-lambda - z)
    - type S = Phi(-lambda - z) / power
    - exaggeration = [lambda (1 - Phi(z - lambda) - Phi(-z - lambda))
      + phi(z - lambda) + phi(z + lambda)] / (lambda power)

    Examples
    --------
    >>> r = retrodesign(2.0, 8.1)
    >>> round(r.power, 6), round(r.type_s, 6), round(r.exaggeration, 4)
    (0.057013, 0.239618, 9.5366)
    """
    if not (math.isfinite(standard_error) and standard_error > 0):
        raise ValueError(f"standard_error must be a positive finite number; got {standard_error}")
    if not math.isfinite(true_effect):
        raise ValueError(f"true_effect must be finite; got {true_effect}")
    _check_alpha(alpha)
    lam = abs(true_effect) / standard_error
    z = norm.ppf(1 - alpha / 2)
    p_hi = norm.cdf(lam - z)
    p_lo = norm.cdf(-lam - z)
    power = p_hi + p_lo
    if lam == 0:
        return Retrodesign(power=float(power), type_s=math.nan, exaggeration=math.nan)
    expected_abs_significant = (lam * (1 - norm.cdf(z - lam) - norm.cdf(-z - lam))
                                + norm.pdf(z - lam) + norm.pdf(z + lam))
    return Retrodesign(power=float(power), type_s=float(p_lo / power),
                       exaggeration=float(expected_abs_significant / (lam * power)))


def minimum_detectable_effect(standard_error: float | np.ndarray, *, alpha: float = 0.05,
                              power: float = 0.8) -> float | np.ndarray:
    """Return the smallest true effect a two-sided z-test detects with the given power.

    Parameters
    ----------
    standard_error : float or ndarray
        Standard error of the estimate (orders per user); any shape.
    alpha : float, default 0.05
        Level of the two-sided test.
    power : float, default 0.8
        Required probability of rejecting.

    Returns
    -------
    float or ndarray
        ``(z_{1-alpha/2} + z_power) * standard_error``, same shape as the input.

    Notes
    -----
    The usual MDE formula; it ignores the far tail, which adds less than 1e-5 of
    power at the defaults (REFERENCES section 8: multiplier 2.801585).

    Examples
    --------
    >>> round(minimum_detectable_effect(1.0), 6)
    2.801585
    """
    _check_alpha(alpha)
    if not 0 < power < 1:
        raise ValueError(f"power must be in (0, 1); got {power}")
    multiplier = norm.ppf(1 - alpha / 2) + norm.ppf(power)
    se = np.asarray(standard_error, dtype=float)
    mde = multiplier * se
    return float(mde) if mde.ndim == 0 else mde


TOLERANCE = 1e-9  # relative to the outcome's scale: differences below it are rounding


def design_metrics(estimates, standard_errors, ci_low, ci_high, gte, *,
                   alpha: float = 0.05, outcome_scale: float | None = None,
                   p_values=None) -> DesignMetrics:
    """Summarise one design's estimates over replications against the realised GTE.

    Parameters
    ----------
    estimates, standard_errors, ci_low, ci_high : array_like, shape (n_replications,)
        Each replication's estimate, its standard error and confidence interval
        (orders per user).
    gte : array_like, shape (n_replications,) or scalar
        The realised GTE of each replication (a scalar is used for all).
    alpha : float, default 0.05
        Level of the test behind ``power`` (kept for the record: significance is
        read from the given CI, which should be a ``1 - alpha`` interval).
    outcome_scale : float, optional
        The outcome's typical size (e.g. the control mean, orders per user).
        Comparisons (coverage, significance, a GTE of zero) allow a tolerance of
        ``TOLERANCE * outcome_scale``, so floating-point rounding in a degenerate
        world (both arms identical) is not read as a miss. By default the largest
        absolute estimate, bound or GTE.
    p_values : array_like, shape (n_replications,), optional
        Each replication's randomization p-value, for a design that asks for
        ``inference = "randomization"``: a replication is then significant when
        its p-value is at most ``alpha`` (a NaN p-value is not significant), and
        power, Type S and Type M count those. By default significance is read
        from the CI.

    Returns
    -------
    DesignMetrics
        The point metrics (mean_estimate, bias, relative_bias, sd, error_sd,
        rmse) use the ``n_estimates`` replications with a finite estimate and GTE,
        also those whose standard error or interval is missing; the interval
        metrics (coverage, ci_width, power, type_s, type_m, mean_se) use the
        ``n = n_reps`` of them that also have an interval. With errors
        ``d_r = estimate_r - gte_r`` and ``g_bar = mean(gte)``:

        - mean_estimate = mean(estimate); SE sd / sqrt(n)
        - bias = mean(d); SE sd(d) / sqrt(n)
        - relative_bias = bias / g_bar (a fraction); SE by the delta method for a
          ratio of means, sqrt((var(d) - 2 R cov(d, gte) + R^2 var(gte)) / n) / |g_bar|.
          Undefined (NaN) when |g_bar| is within 2 Monte Carlo SEs of zero (or
          within the tolerance), where a ratio to it means nothing.
        - sd = SD of the estimates (ddof=1); SE sd / sqrt(2 (n - 1))
        - error_sd = SD of the errors d (each estimate against its own
          replication's GTE, so GTE movement between replications is not counted
          as the design's noise); SE error_sd / sqrt(2 (n - 1))
        - rmse = sqrt(mean(d^2)); SE sd(d^2) / (2 rmse sqrt(n)) (delta method)
        - coverage = share with ci_low <= gte_r <= ci_high; SE sqrt(p (1 - p) / n)
        - ci_width = mean(ci_high - ci_low); SE sd(width) / sqrt(n)
        - power = share whose CI excludes 0 (or, given ``p_values``, whose
          randomization p-value is at most alpha); SE sqrt(p (1 - p) / n)
        - type_s = among the ``n_significant`` replications whose CI excludes 0, the
          share whose estimate's sign differs from the sign of g_bar; SE
          sqrt(p (1 - p) / n_significant). NaN if none is significant or g_bar is
          zero as for relative_bias.
        - type_m = mean(|estimate| among significant) / |g_bar| (the exaggeration
          ratio); SE sd(|estimate| among significant) / |g_bar| / sqrt(n_significant).
          NaN if none is significant or g_bar is zero as for relative_bias.
        - mean_se = mean(standard error); SE sd(standard error) / sqrt(n)
        - usable_share = n / (n + n_dropped), the share of replications that gave
          an estimate and an interval; SE sqrt(p (1 - p) / (n + n_dropped))

        Every metric is NaN when no replication is usable.

    Raises
    ------
    ValueError
        If the arrays are not 1-D of one length, or ``alpha`` is not in (0, 1).

    Notes
    -----
    A replication is dropped from the interval metrics (and counted in ``n_dropped``)
    when its estimate is not finite or its standard error, CI bounds or GTE is NaN;
    it still counts in the point metrics when its estimate and GTE are finite. Type S
    and Type M follow Gelman & Carlin (2014), with the mean realised GTE as the true
    effect.

    Examples
    --------
    >>> m = design_metrics([1.0, 2.0, 3.0, np.nan], [0.5] * 4, [0.0, 1.0, 2.0, 0.0],
    ...                    [2.0, 3.0, 4.0, 1.0], [1.5] * 4)
    >>> m.n_reps, m.n_dropped, m.bias, m.coverage
    (3, 1, 0.5, 0.6666666666666666)

    An estimate whose variance gave no interval still counts in the bias:

    >>> m = design_metrics([1.0, 2.0, 4.0], [0.5, 0.5, np.nan], [0.0, 1.0, np.nan],
    ...                    [2.0, 3.0, np.nan], [1.5] * 3)
    >>> m.n_estimates, m.n_reps, m.bias, m.coverage
    (3, 2, 0.8333333333333334, 1.0)
    """
    _check_alpha(alpha)
    est, se, low, high, g = _check_inputs(estimates, standard_errors, ci_low, ci_high, gte)
    fisher = None if p_values is None else np.broadcast_to(np.asarray(p_values, float), est.shape)
    has_estimate = np.isfinite(est) & ~np.isnan(g)
    is_used = has_estimate & ~np.isnan(se) & ~np.isnan(low) & ~np.isnan(high)
    n_dropped = int(est.size - is_used.sum())
    usable_share, usable_share_se = _share(is_used) if is_used.size else (math.nan, math.nan)
    if not has_estimate.any():
        return _empty_metrics(n_dropped, usable_share, usable_share_se)
    # The point metrics use every replication with an estimate, also those whose variance
    # gave no interval (leaving them out would select on the estimate's own noise).
    point, point_gte = est[has_estimate], g[has_estimate]
    n_estimates = point.size
    est, se, low, high, g = (a[is_used] for a in (est, se, low, high, g))
    fisher = None if fisher is None else fisher[is_used]
    n = est.size
    if outcome_scale is None:
        outcome_scale = float(max(np.abs(point).max(), np.abs(point_gte).max(),
                                  np.abs(low[np.isfinite(low)]).max(initial=0.0),
                                  np.abs(high[np.isfinite(high)]).max(initial=0.0)))
    tol = TOLERANCE * max(float(outcome_scale), np.finfo(float).tiny)

    error = point - point_gte
    g_bar = float(point_gte.mean())
    bias = float(error.mean())
    sd = _sd(point)
    error_sd = _sd(error)
    g_bar_se = _sd(point_gte) / math.sqrt(n_estimates) if n_estimates > 1 else 0.0
    is_zero_gte = abs(g_bar) <= max(2 * g_bar_se, tol)
    rmse = math.sqrt(float(np.mean(error**2)))
    if rmse > 0:
        rmse_se = _sd(error**2) / (2 * rmse * math.sqrt(n_estimates))
    else:
        rmse_se = 0.0 if n_estimates > 1 else math.nan

    if not is_zero_gte:
        ratio = bias / g_bar
        if n_estimates > 1:
            cov = np.cov(error, point_gte, ddof=1)
            ratio_var = cov[0, 0] - 2 * ratio * cov[0, 1] + ratio**2 * cov[1, 1]
            relative_bias_se = (math.sqrt(max(float(ratio_var), 0.0) / n_estimates)
                                / abs(g_bar))
        else:
            relative_bias_se = math.nan
    else:
        ratio, relative_bias_se = math.nan, math.nan

    return DesignMetrics(
        n_reps=n, n_dropped=n_dropped, n_estimates=n_estimates,
        mean_estimate=float(point.mean()), mean_estimate_se=sd / math.sqrt(n_estimates),
        bias=bias, bias_se=error_sd / math.sqrt(n_estimates),
        relative_bias=ratio, relative_bias_se=relative_bias_se,
        sd=sd, sd_se=sd / math.sqrt(2 * (n_estimates - 1)) if n_estimates > 1 else math.nan,
        rmse=rmse, rmse_se=rmse_se,
        usable_share=usable_share, usable_share_se=usable_share_se,
        error_sd=error_sd,
        error_sd_se=error_sd / math.sqrt(2 * (n_estimates - 1)) if n_estimates > 1 else math.nan,
        **_interval_metrics(est, se, low, high, g, fisher, alpha, tol,
                            math.nan if is_zero_gte else g_bar),
    )


def _interval_metrics(est, se, low, high, g, fisher, alpha: float, tol: float,
                      g_bar: float) -> dict[str, float | int]:
    """Coverage, width, power, Type S/M and mean SE over the replications with an interval.

    All NaN (and no significant replication) when none has an interval; Type S and
    Type M also NaN when ``g_bar`` is NaN (a GTE indistinguishable from zero).
    """
    n = est.size
    if n == 0:
        values = dict.fromkeys(("coverage", "coverage_se", "ci_width", "ci_width_se", "power",
                                "power_se", "type_s", "type_s_se", "type_m", "type_m_se",
                                "mean_se", "mean_se_se"), math.nan)
        return values | {"n_significant": 0}
    is_covered = (low - tol <= g) & (g <= high + tol)
    if fisher is None:
        is_significant = (low > tol) | (high < -tol)
    else:  # Fisher's randomization test at level alpha (NaN compares False)
        is_significant = fisher <= alpha
    n_significant = int(is_significant.sum())
    coverage, coverage_se = _share(is_covered)
    power, power_se = _share(is_significant)
    width = high - low

    if n_significant > 0 and not math.isnan(g_bar):
        significant = est[is_significant]
        type_s, type_s_se = _share(np.sign(significant) != np.sign(g_bar))
        abs_significant = np.abs(significant)
        type_m = float(abs_significant.mean()) / abs(g_bar)
        type_m_se = _sd(abs_significant) / abs(g_bar) / math.sqrt(n_significant)
    else:
        type_s = type_s_se = type_m = type_m_se = math.nan
    return {"n_significant": n_significant, "coverage": coverage, "coverage_se": coverage_se,
            "ci_width": float(width.mean()), "ci_width_se": _sd(width) / math.sqrt(n),
            "power": power, "power_se": power_se, "type_s": type_s, "type_s_se": type_s_se,
            "type_m": type_m, "type_m_se": type_m_se, "mean_se": float(se.mean()),
            "mean_se_se": _sd(se) / math.sqrt(n)}


def _check_alpha(alpha: float) -> None:
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1); got {alpha}")


def _check_inputs(estimates, standard_errors, ci_low, ci_high, gte):
    est = np.asarray(estimates, dtype=float)
    if est.ndim != 1:
        raise ValueError(f"estimates must be 1-D (one value per replication); got shape {est.shape}")
    arrays = [est]
    for name, values in (("standard_errors", standard_errors), ("ci_low", ci_low),
                         ("ci_high", ci_high), ("gte", gte)):
        a = np.asarray(values, dtype=float)
        if name == "gte" and a.ndim == 0:
            a = np.full(est.shape, float(a))
        if a.shape != est.shape:
            raise ValueError(f"{name} must have the shape of estimates {est.shape}; got {a.shape}")
        arrays.append(a)
    return arrays


def _sd(values: np.ndarray) -> float:
    """Sample SD (ddof=1); NaN for fewer than two values."""
    return float(np.std(values, ddof=1)) if values.size > 1 else math.nan


def _share(is_event: np.ndarray) -> tuple[float, float]:
    """Share of True values and its binomial standard error."""
    p = float(is_event.mean())
    return p, math.sqrt(p * (1 - p) / is_event.size)


def _empty_metrics(n_dropped: int, usable_share: float, usable_share_se: float
                   ) -> DesignMetrics:
    values = {f.name: math.nan for f in dataclasses.fields(DesignMetrics)}
    values.update(n_reps=0, n_dropped=n_dropped, n_significant=0, n_estimates=0,
                  usable_share=usable_share, usable_share_se=usable_share_se)
    return DesignMetrics(**values)
