"""The plan's answer in words: how long to run, with which design, or what it can detect instead."""

from __future__ import annotations

import math

from spillgauge.formatting import format_number, format_percent
from spillgauge.statistics.metrics import retrodesign

__all__ = ["answer_cuped", "answer_plan", "answer_variants"]


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
                    f"and detects the scenario's effect ({format_number(best['gte'])} orders "
                    f"per user over {d} days) with power {format_percent(best['power'])} "
                    f"\u00b1 {format_percent(best['power_se'])} against the {power:.0%} "
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


def answer_cuped(rows: list[dict], cuped: list[dict], *, power: float, alpha: float,
                 unit: str = "orders per user") -> str:
    """Return how much regression adjustment on the pre-period would shorten the test.

    The projection keeps ``1 - rho^2`` of the plain user-level design's variance
    (Deng, Xu, Kohavi & Walker 2013), so its standard error shrinks by
    ``sqrt(1 - rho^2)``, and recomputes the power at the same effect with a normal
    test (:func:`~spillgauge.statistics.metrics.retrodesign`). It is said only
    when the scenario has a pre-period and a plain user-level design, and it
    holds only where that design is trusted.
    """
    user = [r for r in rows if r["kind"] == "user" and r["is_user_level"]
            and not r.get("adjusted", False)]
    factors = {c["days"]: c["variance_factor"] for c in cuped}
    if not user or not any(math.isfinite(v) for v in factors.values()):
        return ""
    label = user[0]["label"]
    user = [r for r in user if r["label"] == label]
    at = user[-1]
    factor = factors[at["days"]]
    if not math.isfinite(factor):
        return ""
    measured = [r for r in rows if r["kind"] == "user" and r.get("adjusted", False)
                and r["days"] == at["days"]]
    seen = ""
    if measured and at["mean_se"] > 0:
        seen = (f"; {measured[0]['label']} measures "
                f"{format_percent((measured[0]['mean_se'] / at['mean_se']) ** 2)}")
    lead = (f"Regression adjustment on the pre-period (CUPED) keeps "
            f"{format_percent(factor)} of the user-level variance at {at['days']} days "
            f"(1 - rho^2, rho = {format_number(math.sqrt(max(1 - factor, 0)))} between "
            f"pre-period and experiment orders{seen})")
    if not at["trusted"]:
        return (f"{lead}, but {label} is not trusted in this scenario ({at['why_not_trusted']}) "
                f"and adjustment does not remove bias, so it does not shorten the test.")
    plain = next((r["days"] for r in user if r["power"] >= power), None)
    adjusted = None
    for r in user:
        se = r["mean_se"] * math.sqrt(factors[r["days"]])
        if math.isfinite(se) and se > 0 and math.isfinite(r["gte"]) and \
                retrodesign(r["gte"], se, alpha=alpha).power >= power:
            adjusted = r["days"]
            break
    mde = at["mde"] * math.sqrt(factor)
    if plain is not None and adjusted == plain == user[0]["days"]:
        reach = f"{label} reaches {power:.0%} power at the shortest duration planned either way"
    elif adjusted is not None:
        without = f"{plain} days" if plain is not None else "not within the plan"
        reach = f"{label} with it would reach {power:.0%} power at {adjusted} days " \
                f"(without: {without})"
    else:
        reach = f"{label} would not reach {power:.0%} power even with it"
    return (f"{lead}: {reach}, and its minimum detectable effect at {at['days']} days would "
            f"fall from {format_number(at['mde'])} to {format_number(mde)} {unit}.")


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
