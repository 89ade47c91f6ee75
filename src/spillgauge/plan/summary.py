"""A plan's numbers at one duration: power, minimum detectable effect, bias, coverage, trust.

Every row is one design at one duration, computed from that duration's prefix
of every replication: the design's estimates against the truth of the same
first days. Trust is the study's rule (:func:`spillgauge.statistics.trust.assess_trust`);
power is the design's rejection rate at the scenario's effect.
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
from scipy.stats import norm
from scipy.stats import t as student_t

from spillgauge.designs.registry import kind_of
from spillgauge.plan.replication import PlanReplication
from spillgauge.scenario import Scenario
from spillgauge.statistics.metrics import design_metrics
from spillgauge.statistics.recommend import Candidate, recommend
from spillgauge.statistics.trust import assess_trust

__all__ = ["mde_multiplier", "plan_rows", "cuped_rows"]


def mde_multiplier(alpha: float, power: float, degrees_of_freedom: float = math.inf) -> float:
    """Return ``t_{1-alpha/2, df} + z_power``, the minimum detectable effect in standard errors.

    Bloom (1995), *Minimum detectable effects*, Evaluation Review 19(5): the
    smallest true effect a two-sided test at ``alpha`` detects with probability
    ``power`` is this multiple of the estimate's standard error (the far tail
    ignored). With ``df = inf`` it is ``z_{1-alpha/2} + z_power``.

    >>> round(mde_multiplier(0.05, 0.8), 6)
    2.801585
    """
    if not 0 < alpha < 1 or not 0 < power < 1:
        raise ValueError(f"alpha and power must be in (0, 1); got {alpha}, {power}")
    critical = norm.ppf(1 - alpha / 2) if not math.isfinite(degrees_of_freedom) else \
        student_t.ppf(1 - alpha / 2, degrees_of_freedom)
    return float(critical + norm.ppf(power))


def _degrees_of_freedom(values: np.ndarray) -> float:
    """Median stated degrees of freedom; a normal reference (inf) when none is stated."""
    stated = values[~np.isnan(values)]
    return float(np.median(stated)) if stated.size else math.inf


def plan_rows(scenario: Scenario, results: list[PlanReplication], days: tuple[int, ...], *,
              power: float, alpha: float) -> list[dict]:
    """Return one row per design and duration (see :class:`~spillgauge.plan.plan.PlanResult`)."""
    rows = []
    n_users = None
    for d in days:
        truths = [r.truths[d] for r in results]
        gte = np.array([t.gte for t in truths])
        control_mean = float(np.mean([t.control_mean for t in truths]))
        scale = max(abs(control_mean), abs(float(np.mean([t.treated_mean for t in truths]))))
        at_d, candidates, everyone = [], [], []
        for spec in scenario.designs:
            kind = kind_of(spec)
            runs = [r.runs[spec.label][d] for r in results]
            col = {name: np.array([getattr(run, name) for run in runs], dtype=float)
                   for name in ("point", "standard_error", "ci_low", "ci_high",
                                "degrees_of_freedom", "n_units")}
            metrics = design_metrics(col["point"], col["standard_error"], col["ci_low"],
                                     col["ci_high"], gte, alpha=alpha, outcome_scale=scale)
            notes = Counter(run.note for run in runs if run.note)
            note = notes.most_common(1)[0][0] if notes else ""
            verdict = assess_trust(metrics, alpha=alpha, failure_note=note)
            usable = np.isfinite(col["point"]) & np.isfinite(col["standard_error"])
            se = float(np.sqrt(np.mean(col["standard_error"][usable] ** 2))) \
                if usable.any() else math.nan
            mde = mde_multiplier(alpha, power, _degrees_of_freedom(
                col["degrees_of_freedom"][usable])) * se
            at_d.append({
                "label": spec.label, "kind": spec.kind, "days": d,
                "reps": metrics.n_reps, "power": metrics.power, "power_se": metrics.power_se,
                "mde": mde, "mde_relative": mde / control_mean if control_mean else math.nan,
                "bias": metrics.bias, "bias_se": metrics.bias_se,
                "coverage": metrics.coverage, "coverage_se": metrics.coverage_se,
                "sd": metrics.sd, "error_sd": metrics.error_sd, "rmse": metrics.rmse,
                "mean_se": se, "gte": float(gte.mean()), "control_mean": control_mean,
                "n_units": float(np.mean(col["n_units"])),
                "trusted": verdict.is_trusted, "why_not_trusted": verdict.reason or "",
                "recommendable": kind.is_recommendable, "is_user_level": kind.is_user_level,
                "adjusted": bool(spec.params.get("adjust", False)),
                "strata": _strata_of(spec), "table": spec.index,
                "chosen": False, "variant_chosen": False,
            })
            candidate = Candidate(label=spec.label, is_user_level=kind.is_user_level,
                                  unit=kind.describe_unit(spec),
                                  n_units=float(np.mean(col["n_units"])), metrics=metrics)
            if kind.is_recommendable:
                everyone.append((spec.index, candidate))
                if verdict.is_trusted and metrics.power >= power:
                    candidates.append(candidate)
        gte_se = float(gte.std(ddof=1) / math.sqrt(gte.size)) if gte.size > 1 else math.nan
        if candidates:
            # Among the designs trusted at this duration that reach the target power, the
            # study's recommendation rule chooses (lowest RMSE; the finer unit within
            # Monte Carlo error).
            chosen = recommend(candidates, gte=float(gte.mean()), gte_se=gte_se,
                               alpha=alpha).label
            for row in at_d:
                row["chosen"] = row["label"] == chosen
        # Among the variants of one tuned [[design]] table, the same rule chooses.
        tables = {index for index, _ in everyone}
        for index in tables:
            variants = [c for i, c in everyone if i == index]
            pick = recommend(variants, gte=float(gte.mean()), gte_se=gte_se,
                             alpha=alpha).label if len(variants) > 1 else None
            for row in at_d:
                if row["table"] == index:
                    row["variant_chosen"] = row["label"] == pick
        if n_users is None:
            n_users = _n_users(results)
        user = [row for row in at_d if row["is_user_level"] and row["kind"] == "user"]
        for row in at_d:
            # Effective sample size (Kish 1965): users a user-level design would need to be
            # as precise, n_users x its variance over this design's (mean squared SEs).
            reference = user[0]["mean_se"] if user else math.nan
            ratio = (reference / row["mean_se"]) ** 2 if row["mean_se"] > 0 else math.nan
            row["effective_n"] = n_users * ratio if math.isfinite(ratio) else math.nan
        rows += at_d
    return rows


def _n_users(results: list[PlanReplication]) -> int:
    return int(results[0].n_users) if results else 0


def _strata_of(spec) -> str:
    """Return what a user design stratifies on as the plan projects it (``"none"``, ``"pools"``,
    ``"pre_period"`` at the default number of groups, ``"pre_period/<groups>"`` otherwise)."""
    from spillgauge.designs.user_level import PRE_PERIOD_STRATA

    strata = str(spec.params.get("strata", "none"))
    groups = spec.params.get("pre_period_strata", PRE_PERIOD_STRATA)
    return f"{strata}/{groups}" if strata == "pre_period" and groups != PRE_PERIOD_STRATA \
        else strata


def cuped_rows(results: list[PlanReplication], days: tuple[int, ...]) -> list[dict]:
    """Return, per duration, the variance CUPED and stratification would keep.

    Regression adjustment on the pre-period (CUPED; Deng, Xu, Kohavi & Walker
    2013, WSDM) keeps ``1 - rho^2`` of a user-level estimate's variance, with rho
    the correlation over users of the outcome's pre-period analogue (orders;
    revenue: pre-period orders x basket value; conversion: any pre-period order)
    and the outcome; rho is
    averaged over replications in the all-control world. Stratified
    randomization keeps about the within-stratum share of the outcome's variance
    (``strata_pre_period``, ``strata_pools``; Cochran 1977, 5.6), averaged the
    same way (NaN when the scenario has no pre-period to stratify on).
    """
    rows = []
    for d in days:
        rho = np.array([r.history_correlation[d] for r in results], dtype=float)
        rho_mean = float(np.nanmean(rho)) if np.isfinite(rho).any() else math.nan
        row = {"days": d, "rho": rho_mean,
               "variance_factor": 1 - rho_mean**2 if math.isfinite(rho_mean) else math.nan}
        for source in ("pre_period", "pools"):
            kept = np.array([r.strata_within_share.get(d, {}).get(source, math.nan)
                             for r in results], dtype=float)
            row[f"strata_{source}"] = float(np.nanmean(kept)) if np.isfinite(kept).any() \
                else math.nan
        rows.append(row)
    return rows
