"""The plan's answer in words: how long to run, with which design, or what it can detect instead."""

from __future__ import annotations

import math

from spillgauge.formatting import format_number, format_percent
from spillgauge.statistics.metrics import retrodesign

__all__ = ["answer_cuped", "answer_plan", "answer_strata", "answer_variants"]


def _candidates(rows: list[dict]) -> list[dict]:
    return [r for r in rows if r["recommendable"]]


def answer_plan(rows: list[dict], *, power: float, horizon_days: int,
                unit: str = "orders per user") -> str:
    """Return the shortest duration at which a trusted design reaches ``power``, in a sentence.

    Among the designs the recommendation may choose, a duration qualifies when a
    design is trusted there (the study's trust rule, applied to that duration's
    prefix) and its measured power is at least ``power``; at the shortest such
    duration the design the study's recommendation rule chooses among those
    (``chosen``: lowest RMSE, the finer unit within Monte Carlo error) is named.
    Otherwise the sentence says that none does within the longest duration
    planned, and names the smallest MDE a trusted design reaches.
    """
    rows = _candidates(rows)
    if not rows:
        return "The scenario has no design that can be recommended (only diagnostics)."
    longest = max(r["days"] for r in rows)
    within = f"within {longest} days" + (" (the whole horizon)" if longest == horizon_days
                                          else f" (the horizon is {horizon_days} days)")
    for d in sorted({r["days"] for r in rows}):
        passing = [r for r in rows if r["days"] == d and r["trusted"] and r["power"] >= power]
        if passing:
            chosen = [r for r in passing if r.get("chosen")]
            best = chosen[0] if chosen else min(passing, key=lambda r: (r["rmse"], r["label"]))
            first = d == min(r["days"] for r in rows)
            note = (" This is the shortest duration planned: pass shorter --days to see "
                    "whether fewer days suffice." if first else "")
            return (f"Run it for at least {d} days with {best['label']}: it is trusted there "
                    f"and detects the scenario's effect ({format_number(best['gte'])} {unit} "
                    f"over {d} days) with power {format_percent(best['power'])} (Monte Carlo "
                    f"SE {format_percent(best['power_se'])}) against the {power:.0%} "
                    f"target; its minimum detectable effect at {power:.0%} power is "
                    f"{format_number(best['mde'])} {unit} "
                    f"({format_percent(best['mde_relative'])} of the control mean).{note}")
    trusted = [r for r in rows if r["trusted"] and math.isfinite(r["mde"])]
    if not trusted:
        last = sorted((r for r in rows if r["days"] == longest), key=lambda r: r["label"])
        why = "; ".join(f"{r['label']} {r['why_not_trusted']}" for r in last)
        return (f"No design is trusted at any duration {within}, so no duration can be "
                f"recommended (at {longest} days: {why}).")
    best = min((r for r in trusted if r["days"] == max(t["days"] for t in trusted)),
               key=lambda r: (r["mde"], r["label"]))
    most = max(trusted, key=lambda r: (r["power"], -r["days"]))
    return (f"No trusted design reaches {power:.0%} power {within}; the highest power of a "
            f"trusted design is {format_percent(most['power'])} ({most['label']} at "
            f"{most['days']} days). The smallest effect detectable at {power:.0%} power is "
            f"{format_number(best['mde'])} {unit} "
            f"({format_percent(best['mde_relative'])} of the control mean) with "
            f"{best['label']} at {best['days']} days, against the scenario's effect of "
            f"{format_number(best['gte'])}.")


def _plain_user_rows(rows: list[dict]) -> list[dict]:
    """Return the rows of the first plain user-level design (no adjustment, no strata)."""
    user = [r for r in rows if r["kind"] == "user" and r["is_user_level"]
            and not r.get("adjusted", False) and r.get("strata", "none") == "none"]
    return [r for r in user if r["label"] == user[0]["label"]] if user else []


def _projected_reach(user: list[dict], factors: dict[int, float], *, power: float,
                     alpha: float, unit: str = "orders per user") -> str:
    """Return when the plain user design would reach ``power`` with its variance times ``factors``.

    Its standard error shrinks by ``sqrt(factor)`` at each duration and the power
    at the same effect comes from a normal test
    (:func:`~spillgauge.statistics.metrics.retrodesign`); the MDE at the longest
    duration shrinks by the same ``sqrt(factor)``.
    """
    label, at = user[0]["label"], user[-1]
    plain = next((r["days"] for r in user if r["power"] >= power), None)
    projected = None
    for r in user:
        factor = factors.get(r["days"], math.nan)
        se = r["mean_se"] * math.sqrt(factor) if math.isfinite(factor) else math.nan
        if math.isfinite(se) and se > 0 and math.isfinite(r["gte"]) and \
                retrodesign(r["gte"], se, alpha=alpha).power >= power:
            projected = r["days"]
            break
    mde = at["mde"] * math.sqrt(factors[at["days"]])
    if plain is not None and projected == plain == user[0]["days"]:
        reach = f"{label} reaches {power:.0%} power at the shortest duration planned either way"
    elif projected is not None:
        without = f"{plain} days" if plain is not None else "not within the plan"
        reach = f"{label} with it would reach {power:.0%} power at {projected} days " \
                f"(without: {without})"
    else:
        reach = f"{label} would not reach {power:.0%} power even with it"
    return (f"{reach}, and its minimum detectable effect at {at['days']} days would "
            f"fall from {format_number(at['mde'])} to {format_number(mde)} {unit}.")


def _measured_share(rows: list[dict], at: dict, wanted) -> str:
    """Return "LABEL measures X%" for the first design row matching ``wanted`` at ``at``'s days."""
    measured = [r for r in rows if r["kind"] == "user" and r["days"] == at["days"]
                and wanted(r)]
    if measured and at["mean_se"] > 0 and math.isfinite(measured[0]["mean_se"]):
        return (f"{measured[0]['label']} measures "
                f"{format_percent((measured[0]['mean_se'] / at['mean_se']) ** 2)}")
    return ""


_PAIRS = {"orders": "pre-period and experiment orders",
          "revenue": "pre-period revenue (orders x basket value) and experiment revenue",
          "conversion": "ordering in the pre-period and converting in the experiment"}


def answer_cuped(rows: list[dict], cuped: list[dict], *, power: float, alpha: float,
                 unit: str = "orders per user", outcome: str = "orders") -> str:
    """Return how much regression adjustment on the pre-period would shorten the test.

    The projection keeps ``1 - rho^2`` of the plain user-level design's variance
    (Deng, Xu, Kohavi & Walker 2013), so its standard error shrinks by
    ``sqrt(1 - rho^2)``, and recomputes the power at the same effect with a normal
    test (:func:`~spillgauge.statistics.metrics.retrodesign`). ``rho`` is between
    the outcome and its pre-period analogue (``outcome``: orders, revenue as
    pre-period orders x basket value, conversion as any pre-period order), the
    covariate the adjusted estimators use. It is said only
    when the scenario has a pre-period and a plain user-level design, and it
    holds only where that design is trusted.
    """
    user = _plain_user_rows(rows)
    factors = {c["days"]: c["variance_factor"] for c in cuped}
    if not user or not math.isfinite(factors.get(user[-1]["days"], math.nan)):
        return ""
    label, at = user[0]["label"], user[-1]
    factor = factors[at["days"]]
    seen = _measured_share(rows, at, lambda r: r.get("adjusted", False)
                           and r.get("strata", "none") == "none")
    lead = (f"Regression adjustment on the pre-period (CUPED) keeps "
            f"{format_percent(factor)} of the user-level variance at {at['days']} days "
            f"(1 - rho^2, rho = {format_number(math.sqrt(max(1 - factor, 0)))} between "
            f"{_PAIRS[outcome]}{'; ' + seen if seen else ''})")
    if not at["trusted"]:
        return (f"{lead}, but {label} is not trusted in this scenario: it "
                f"{at['why_not_trusted']}; adjustment does not remove bias, so it does not "
                "shorten the test.")
    return f"{lead}: {_projected_reach(user, factors, power=power, alpha=alpha, unit=unit)}"


def answer_strata(rows: list[dict], cuped: list[dict], *, power: float, alpha: float,
                  unit: str = "orders per user") -> str:
    """Return how much stratified randomization would shorten the test, beside CUPED.

    A fixed share treated within strata (``strata = "pre_period"``: groups of equal
    size by pre-period orders; ``"pools"``: home stock pools) keeps about the
    within-stratum share of the outcome's variance (Cochran 1977, 5.6; Imbens &
    Rubin 2015, ch. 9). The better source is projected as CUPED is
    (:func:`_projected_reach`); a stratified design in the scenario is quoted with
    its measured share. Said only when there is a plain user-level design.
    """
    user = _plain_user_rows(rows)
    if not user:
        return ""
    at = user[-1]
    kept = {source: {c["days"]: c.get(f"strata_{source}", math.nan) for c in cuped}
            for source in ("pre_period", "pools")}
    usable = {s: f for s, f in kept.items() if math.isfinite(f.get(at["days"], math.nan))}
    if not usable:
        return ""
    words = {"pre_period": "pre-period order groups", "pools": "stock pools"}
    parts = []
    for source, factors in usable.items():
        seen = _measured_share(rows, at, lambda r, s=source: r.get("strata") == s
                               and not r.get("adjusted", False))
        parts.append(f"{format_percent(factors[at['days']])} with {words[source]}"
                     + (f" ({seen})" if seen else ""))
    best = min(usable, key=lambda s: usable[s][at["days"]])
    lead = (f"Stratified randomization of users would keep about the within-stratum share "
            f"of the user-level variance at {at['days']} days: {' and '.join(parts)}")
    if not at["trusted"]:
        return (f"{lead}, but {user[0]['label']} is not trusted in this scenario and strata "
                f"do not remove bias, so they do not shorten the test.")
    return (f"{lead}. Stratifying on {words[best]}, "
            f"{_projected_reach(user, usable[best], power=power, alpha=alpha, unit=unit)}")


def answer_variants(rows: list[dict]) -> str:
    """Return, for each design table tuned over listed values, the variant to use and why.

    At the longest duration planned, the variant the study's recommendation rule
    chooses among the table's variants (``variant_chosen``: lowest RMSE among the
    trusted ones, the finer unit within Monte Carlo error) is named with its
    bias and SD, against the most biased and the noisiest other variants (the
    trade-off the listed values span).
    """
    longest = max((r["days"] for r in rows), default=None)
    tables: dict[int, list[dict]] = {}
    for r in rows:
        if r["days"] == longest and r["recommendable"]:
            tables.setdefault(r.get("table", -1), []).append(r)
    sentences = []
    for variants in tables.values():
        if len(variants) < 2:
            continue
        names = ", ".join(r["label"] for r in variants)
        chosen = [r for r in variants if r.get("variant_chosen")]
        if not chosen:
            sentences.append(f"Of the tuned variants ({names}) none is trusted at "
                             f"{longest} days.")
            continue
        best = chosen[0]
        lowest = min((r for r in variants if r["trusted"]), key=lambda r: r["rmse"])
        others = [r for r in variants if r is not best]
        biased = max(others, key=lambda r: abs(r["bias"]))
        noisy = max(others, key=lambda r: r["sd"])
        trade = [f"{biased['label']} has bias {format_number(biased['bias'], sign=True)}"]
        if noisy is not biased:
            trade.append(f"{noisy['label']} SD {format_number(noisy['sd'])}")
        near = "" if lowest is best else (
            f"; {lowest['label']} has a lower RMSE ({format_number(lowest['rmse'])}) within "
            "Monte Carlo error, and the finer unit is preferred")
        sentences.append(
            f"Of the tuned variants ({names}), use {best['label']} at {longest} days: RMSE "
            f"{format_number(best['rmse'])} (bias {format_number(best['bias'], sign=True)}, "
            f"SD {format_number(best['sd'])}){near}; " + ", ".join(trade) + ".")
    return " ".join(sentences)
