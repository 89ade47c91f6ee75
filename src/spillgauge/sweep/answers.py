"""The sentences a sweep answers with: where each design can be trusted, and what is recommended.

Plain text from the sweep's rows (one dict per point x design); no statistics here.
"""

from __future__ import annotations

import math

from spillgauge.formatting import format_value

__all__ = ["answer_one_axis", "answer_two_axes", "split_key"]


def split_key(key: str) -> list[str]:
    """Split ``section.key`` in two, ``design.<label>.key`` in three (labels may hold dots)."""
    if not isinstance(key, str):
        return []
    if key.startswith("design."):
        label, _, name = key[len("design."):].rpartition(".")
        return ["design", label, name]
    return key.split(".")


def _labels(rows: list[dict]) -> list[str]:
    return list(dict.fromkeys(row["label"] for row in rows))


def _is_diagnostic(rows: list[dict], label: str) -> bool:
    return any(bool(row.get("is_diagnostic")) for row in rows if row["label"] == label)


def _recommended_at(rows: list[dict], where: dict) -> str | None:
    return next((row["label"] for row in rows if row["recommended"]
                 and all(row[k] == v for k, v in where.items())), None)


def _why_not(row: dict, key: str) -> str:
    """Say in numbers why a design is not trusted at one value."""
    at = f"at {format_value(row[key])}"
    if row["distrust"] == "no_estimates":
        return f"it gave no usable estimates {at}"
    if row["distrust"] == "coverage":
        return f"its CI covers the GTE in {row['coverage']:.0%} of replications {at}"
    if not row["sd"] > 0:
        return f"its bias is {row['bias']:+.3g} with no spread at all, {at}"
    return f"its bias is {row['bias']:+.3g}, {abs(row['bias']) / row['sd']:.1f} times its SD, {at}"


def _trust_clause(design_rows: list[dict], key: str) -> str:
    first = design_rows[0]
    units = {row["unit"] for row in design_rows}
    name = f"the {first['label']} design" + (f" (randomized by {first['unit']})"
                                             if len(units) == 1 else "")
    values = [format_value(row[key]) for row in design_rows]
    trusted = [bool(row["trusted"]) for row in design_rows]
    span = f"{key} = {values[0]}" if len(values) == 1 else \
        f"{key} from {values[0]} to {values[-1]}"
    if all(trusted):
        return f"{name} is trustworthy at every {span}"
    if not any(trusted):
        best = max(design_rows, key=lambda r: r["coverage"] if math.isfinite(r["coverage"])
                   else -1.0)
        return f"{name} is not trustworthy at any {span} ({_why_not(best, key)})"
    k = trusted.index(True)
    if all(trusted[k:]):
        return (f"{name} stops being trustworthy below {key} = {values[k]} "
                f"({_why_not(design_rows[k - 1], key)})")
    k = len(trusted) - 1 - trusted[::-1].index(True)
    if all(trusted[:k + 1]):
        return (f"{name} stops being trustworthy above {key} = {values[k]} "
                f"({_why_not(design_rows[k + 1], key)})")
    shown = [v for v, t in zip(values, trusted) if t]
    return f"{name} is trustworthy only at {key} = " + ", ".join(shown)


def _runs(labels: list[str | None], values: list[str]) -> list[tuple[str | None, str, str]]:
    runs: list[list] = []
    for label, value in zip(labels, values):
        if runs and runs[-1][0] == label:
            runs[-1][2] = value
        else:
            runs.append([label, value, value])
    return [tuple(run) for run in runs]


def answer_one_axis(rows: list[dict], key: str) -> str:
    rows = sorted(rows, key=lambda r: r[key])
    values = list(dict.fromkeys(row[key] for row in rows))
    shown = [format_value(v) for v in values]
    clauses = [_trust_clause([r for r in rows if r["label"] == label], key)
               for label in _labels(rows) if not _is_diagnostic(rows, label)]
    diagnostics = [label for label in _labels(rows) if _is_diagnostic(rows, label)]
    if not clauses:
        clauses = ["no design other than a test of interference was swept"]
    first = "; ".join(clauses)
    sentences = [first[0].upper() + first[1:] + "."]
    if diagnostics:
        sentences.append(", ".join(diagnostics) + (" is a test" if len(diagnostics) == 1 else
                                                   " are tests")
                         + " of interference: a diagnostic, never judged trustworthy or "
                         "recommended.")
    chosen = [_recommended_at(rows, {key: v}) for v in values]
    runs = _runs(chosen, shown)
    if len(runs) == 1 and len(values) > 1:
        label = runs[0][0]
        sentences.append(f"The {label} design is recommended at every value." if label
                         else "No design is trustworthy at any value.")
    else:
        parts = []
        for label, lo, hi in runs:
            where = f"{key} = {lo}" if lo == hi else f"{key} from {lo} to {hi}"
            parts.append(f"{label or 'no design (none is trusted)'} at {where}")
        sentences.append("Recommended: " + ", then ".join(parts) + ".")
    parts = split_key(key)
    if parts[0] == "design":
        own = [r for r in rows if r["label"] == parts[1] and math.isfinite(r["rmse"])]
        if own:
            best = min(own, key=lambda r: r["rmse"])
            sentences.append(f"The RMSE of {parts[1]} is lowest at {parts[2]} = "
                             f"{format_value(best[key])} ({best['rmse']:.3g} ± {best['rmse_se']:.2g}).")
    return " ".join(sentences)


def answer_two_axes(rows: list[dict], key_x: str, key_y: str) -> str:
    grid = list(dict.fromkeys((row[key_x], row[key_y]) for row in rows))
    xs, ys = sorted({x for x, _ in grid}), sorted({y for _, y in grid})
    chosen = {(x, y): _recommended_at(rows, {key_x: x, key_y: y}) for x, y in grid}
    counts = [(label, sum(c == label for c in chosen.values()))
              for label in [*_labels(rows), None]]
    tally = ", ".join(f"{label or 'no design (none trusted)'} at {n}" for label, n in counts if n)
    sentences = [f"Over the {len(xs)} x {len(ys)} grid of {key_x} and {key_y}, the recommended "
                 f"design is {tally} of {len(grid)} points."]
    # Describe along the longer axis, one clause per value of the shorter one.
    outer, inner = (key_y, key_x) if len(ys) <= len(xs) else (key_x, key_y)
    outer_values, inner_values = (ys, xs) if outer == key_y else (xs, ys)
    clauses = []
    for o in outer_values:
        labels = [chosen[(i, o) if outer == key_y else (o, i)] for i in inner_values]
        runs = _runs(labels, [format_value(v) for v in inner_values])
        if len(runs) == 1:
            parts = [f"{runs[0][0] or 'no design'} at every {inner}"]
        else:
            parts = [f"{label or 'no design'} at {lo if lo == hi else f'{lo} to {hi}'}"
                     for label, lo, hi in runs]
            parts[0] = parts[0].replace(" at ", f" at {inner} ", 1)
        clauses.append(f"at {outer} = {format_value(o)}, " + ", ".join(parts))
    text = "; ".join(clauses)
    sentences.append(text[0].upper() + text[1:] + ".")
    return " ".join(sentences)
