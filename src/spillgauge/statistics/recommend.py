"""Recommend a randomization unit from the designs' metrics, and say why in numbers.

A design is *trusted* when its confidence interval covers the GTE nearly as often
as promised and its bias does not dominate its noise (see :func:`~spillgauge.statistics.trust.is_trusted`).
Among trusted designs the most accurate (lowest RMSE) wins; when several are
equally accurate within Monte Carlo error, the finer unit (more units per
replication) is preferred. When no design is trusted, the recommendation says so
and names the least bad one.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

from spillgauge.formatting import format_number, format_percent
from spillgauge.statistics.metrics import DesignMetrics
from spillgauge.statistics.trust import assess_trust

__all__ = ["Candidate", "Recommendation", "recommend"]


@dataclass(frozen=True, slots=True, kw_only=True)
class Candidate:
    """One design as the recommender sees it.

    Parameters
    ----------
    label : str
        The design's label, unique in the study (e.g. ``"cluster-pools"``).
    is_user_level : bool
        Whether the design randomizes single users: other designs' spillover is
        measured against it in the explanation.
    unit : str
        The randomization unit in words, e.g. ``"user"``, ``"pool"``,
        ``"graph community"``, ``"market time block of 24 h"``.
    n_units : float
        Mean number of randomized units per replication (NaN when unknown; such a
        design then loses every finer-unit preference).
    metrics : DesignMetrics
        The design's metrics over the study's replications.
    params : Mapping, optional
        The design's parameters, for display (e.g. ``{"block_hours": 24}``).
    failure_note : str, optional
        Why replications gave no estimate, when some did not.
    """

    label: str
    is_user_level: bool
    unit: str
    n_units: float
    metrics: DesignMetrics
    params: Mapping[str, object] = field(default_factory=dict)
    failure_note: str = ""

    def __post_init__(self) -> None:
        if not self.label:
            raise ValueError("Candidate.label must be a non-empty string; got ''")
        if not (self.n_units >= 0 or math.isnan(self.n_units)):
            raise ValueError(f"Candidate.n_units must be >= 0 (or NaN); got {self.n_units}")


@dataclass(frozen=True, slots=True)
class Recommendation:
    """The recommended design and the reason, in plain words with numbers.

    Parameters
    ----------
    label : str or None
        Label of the recommended design; None when no design can be trusted.
    reason : str
        Two to five sentences giving the numbers behind the choice.
    is_trustworthy : bool
        Whether the recommended design is trusted (False when ``label`` is None).
    trusted : tuple of str
        Labels of the trusted designs, lowest RMSE first.
    ranking : tuple of str
        Labels of all designs by RMSE, lowest first; designs without a finite RMSE last.
    """

    label: str | None
    reason: str
    is_trustworthy: bool
    trusted: tuple[str, ...]
    ranking: tuple[str, ...]


def recommend(candidates: Iterable[Candidate], *, gte: float, gte_se: float,
              alpha: float = 0.05, unit: str = "orders per user") -> Recommendation:
    """Choose the randomization unit to use and explain the trade-off in numbers.

    Parameters
    ----------
    candidates : iterable of Candidate
        The designs of the study, with unique labels.
    gte : float
        Mean GTE over the replications (orders per user).
    gte_se : float
        Its Monte Carlo standard error (NaN when unknown).
    unit : str, default "orders per user"
        The outcome's unit in words, for the explanation.
    alpha : float, default 0.05
        Level of the designs' confidence intervals and tests.

    Returns
    -------
    Recommendation

    Raises
    ------
    ValueError
        If there is no candidate, labels repeat, ``gte`` is not finite, ``gte_se`` is
        negative or ``alpha`` is not in (0, 1).

    Notes
    -----
    Among the designs that pass :func:`~spillgauge.statistics.trust.is_trusted`, the best is the one of lowest
    RMSE. Every trusted design with ``rmse - best_rmse <= 2 sqrt(rmse_se^2 +
    best_rmse_se^2)`` is as accurate within Monte Carlo error; of these the one with
    the most units per replication is chosen, ties broken by RMSE (preferring the
    finer unit is common practice, no source). The reason compares the choice with
    the most accurate user-level design, if any: that design's bias, and what the
    choice costs in SD and power.

    Examples
    --------
    >>> from spillgauge.statistics.metrics import design_metrics
    >>> m = design_metrics([0.9, 1.1, 1.0, 1.2], [0.1] * 4, [0.7, 0.9, 0.8, 1.0],
    ...                    [1.1, 1.3, 1.2, 1.4], [1.0] * 4)
    >>> c = Candidate(label="user", is_user_level=True, unit="user", n_units=1000.0, metrics=m)
    >>> r = recommend([c], gte=1.0, gte_se=0.01)
    >>> r.label, r.is_trustworthy, r.ranking
    ('user', True, ('user',))
    """
    ranked = _check_inputs(candidates, gte, gte_se, alpha)
    ranking = tuple(c.label for c in ranked)
    trusted = [c for c in ranked if _why_not(c, alpha) is None]
    if not trusted:
        return Recommendation(label=None, reason=_explain_none(ranked, gte, alpha, unit),
                              is_trustworthy=False, trusted=(), ranking=ranking)
    best = trusted[0]
    near = [c for c in trusted if c is best or c.metrics.rmse - best.metrics.rmse
            <= 2 * math.hypot(_zero_nan(c.metrics.rmse_se), _zero_nan(best.metrics.rmse_se))]
    chosen = max(near, key=lambda c: (_zero_nan(c.n_units), -c.metrics.rmse))
    reason = _explain_choice(chosen, best, ranked, gte, gte_se, alpha, unit)
    return Recommendation(label=chosen.label, reason=reason, is_trustworthy=True,
                          trusted=tuple(c.label for c in trusted), ranking=ranking)


def _check_inputs(candidates, gte, gte_se, alpha) -> list[Candidate]:
    candidates = list(candidates)
    if not candidates:
        raise ValueError("candidates must hold at least one design; got none")
    labels = [c.label for c in candidates]
    repeated = sorted({label for label in labels if labels.count(label) > 1})
    if repeated:
        raise ValueError(f"candidate labels must be unique; repeated: {', '.join(repeated)}")
    if not math.isfinite(gte):
        raise ValueError(f"gte must be finite; got {gte}")
    if gte_se < 0:
        raise ValueError(f"gte_se must be >= 0 (or NaN); got {gte_se}")
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1); got {alpha}")
    order = sorted(range(len(candidates)),
                   key=lambda i: (not math.isfinite(candidates[i].metrics.rmse),
                                  _zero_nan(candidates[i].metrics.rmse), i))
    return [candidates[i] for i in order]


def _why_not(candidate: Candidate, alpha: float) -> str | None:
    """Return why a candidate is not trusted, in words, or None when it is."""
    return assess_trust(candidate.metrics, alpha=alpha,
                        failure_note=candidate.failure_note).reason


def _explain_choice(chosen, best, ranked, gte, gte_se, alpha, unit) -> str:
    m = chosen.metrics
    params = ", ".join(f"{k}={v}" for k, v in chosen.params.items())
    where = f"{chosen.label}: {params}" if params else chosen.label
    gte_text = (f"{format_number(gte)}, Monte Carlo SE {format_number(gte_se)}"
                if math.isfinite(gte_se) else format_number(gte))
    n_point = max(m.n_estimates, m.n_reps)  # metrics built without n_estimates carry 0
    among = "" if n_point == m.n_reps else f" (in the {m.n_reps} that gave an interval)"
    sentences = [
        f"Randomize by {chosen.unit} ({where}): over {n_point} replications its bias is "
        f"{format_number(m.bias, sign=True)} {unit} ({format_percent(m.relative_bias, sign=True)} of the "
        f"GTE of {gte_text}), SD {format_number(m.sd)}, RMSE {format_number(m.rmse)}, CI coverage "
        f"{m.coverage:.1%}{among} against the nominal {1 - alpha:.0%}, and power {m.power:.0%}."]
    user = next((c for c in ranked if c.is_user_level and math.isfinite(c.metrics.rmse)), None)
    if user is not None and not chosen.is_user_level:
        sentences += _versus_user(chosen, user, gte, unit)
    else:
        runner_up = next((c for c in ranked if c is not chosen and math.isfinite(c.metrics.rmse)),
                         None)
        if runner_up is None:
            sentences.append("It is the only design with usable estimates.")
        elif chosen is best:
            sentences.append(f"No design was more accurate: the runner-up, {runner_up.label} "
                             f"(by {runner_up.unit}), has RMSE {format_number(runner_up.metrics.rmse)} "
                             f"against {format_number(m.rmse)}.")
    if chosen is not best:
        sentences.append(
            f"{best.label} has a slightly lower RMSE ({format_number(best.metrics.rmse)}), but the gap is "
            f"within Monte Carlo error, so the finer unit is preferred: {chosen.n_units:,.0f} "
            f"units per replication against {best.n_units:,.0f}.")
    untrusted = [f"{c.label} {_why_not(c, alpha)}" for c in ranked
                 if _why_not(c, alpha) is not None]
    if untrusted:
        sentences.append("Not trusted: " + "; ".join(untrusted) + ".")
    return " ".join(sentences)


def _versus_user(chosen, user, gte, unit) -> list[str]:
    u, m = user.metrics, chosen.metrics
    is_biased = abs(u.bias) > 2 * _zero_nan(u.bias_se)
    if not is_biased:
        first = (f"The user-level design ({user.label}) shows no clear bias "
                 f"({format_number(u.bias, sign=True)} {unit}, Monte Carlo SE "
                 f"{format_number(u.bias_se)}) but has "
                 f"RMSE {format_number(u.rmse)} against {format_number(m.rmse)}.")
    elif u.mean_estimate != 0 and 0 < u.bias / u.mean_estimate <= 1:
        first = (f"{u.bias / u.mean_estimate:.0%} of the user-level estimate of "
                 f"{format_number(u.mean_estimate)} is spillover: bias {format_number(u.bias, sign=True)} "
                 f"{unit} on a GTE of {format_number(gte)} ({format_percent(u.relative_bias, sign=True)}), and its "
                 f"CI covers the GTE in {u.coverage:.1%} of replications.")
    else:
        first = (f"The user-level estimate of {format_number(u.mean_estimate)} is off by "
                 f"{format_number(u.bias, sign=True)} {unit} on a GTE of {format_number(gte)} "
                 f"({format_percent(u.relative_bias, sign=True)}) because of spillover, and its CI covers "
                 f"the GTE in {u.coverage:.1%} of replications.")
    sd_ratio = m.sd / u.sd if u.sd > 0 else math.inf
    inflated = (" (the user-level power is inflated by its bias)"
                if is_biased and u.bias * gte > 0 else "")
    if sd_ratio > 1:
        second = (f"The price is noise: SD {format_number(m.sd)} against {format_number(u.sd)} for user-level "
                  f"({sd_ratio:.1f} times), and power {m.power:.0%} against {u.power:.0%}"
                  f"{inflated}.")
    else:
        second = (f"It is also no noisier than user-level: SD {format_number(m.sd)} against "
                  f"{format_number(u.sd)}, and power {m.power:.0%} against {u.power:.0%}{inflated}.")
    return [first, second]


def _explain_none(ranked, gte, alpha, unit) -> str:
    problems = "; ".join(f"{c.label} {_why_not(c, alpha)}" for c in ranked)
    sentences = [f"No design can be trusted at the nominal {1 - alpha:.0%} level: {problems}."]
    least_bad = next((c for c in ranked if math.isfinite(c.metrics.rmse)), None)
    if least_bad is None:
        sentences.append("None of them produced usable estimates, so there is nothing to "
                         "recommend.")
    else:
        m = least_bad.metrics
        sentences.append(
            f"If you must run one, {least_bad.label} (by {least_bad.unit}) has the lowest RMSE, "
            f"{format_number(m.rmse)} {unit} on a GTE of {format_number(gte)}, with bias "
            f"{format_number(m.bias, sign=True)} and CI coverage {m.coverage:.1%}; do not take its "
            f"confidence interval at face value.")
    return " ".join(sentences)


def _zero_nan(x: float) -> float:
    return 0.0 if math.isnan(x) else x
