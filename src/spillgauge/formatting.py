"""Numbers in words: every figure spillgauge prints goes through one of these.

>>> format_number(0.012345), format_number(1234.5, sign=True), format_percent(0.0456)
('0.0123', '+1,234', '4.6%')
>>> format_value(12), format_value(0.5), format_cell("{:.2f}", None), format_quantity(12000)
('12', '0.5', 'n/a', '12,000')
"""

from __future__ import annotations

import math
import numbers
import re
import textwrap

__all__ = ["format_number", "format_percent", "format_value", "format_cell", "format_quantity",
           "OUTCOME_UNITS", "outcome_unit", "wrap_text", "TEXT_WIDTH"]

# Printed paragraphs and tables fit a terminal this wide.
TEXT_WIDTH = 100

# What one unit of each ``[study] outcome`` is, per user over the horizon, in words.
OUTCOME_UNITS = {"orders": "fulfilled orders per user", "conversion":
                 "share of users with a fulfilled order", "revenue": "revenue per user"}


def outcome_unit(summary: dict) -> str:
    """Return the unit of a study summary's outcome in words (orders for older summaries).

    >>> outcome_unit({"scenario_settings": {"study": {"outcome": "revenue"}}})
    'revenue per user'
    """
    outcome = summary.get("scenario_settings", {}).get("study", {}).get("outcome", "orders")
    return OUTCOME_UNITS.get(outcome, outcome)


def format_number(x: float, *, sign: bool = False) -> str:
    """Format a number with three significant digits (thousands in full); ``n/a`` if not finite."""
    if not math.isfinite(x):
        return "n/a"
    if x == 0:
        return "0"
    if abs(x) >= 1000:
        return f"{x:+,.0f}" if sign else f"{x:,.0f}"
    return f"{x:+.3g}" if sign else f"{x:.3g}"


def format_percent(x: float, *, sign: bool = False) -> str:
    """Format a fraction as a percentage, one decimal below 10%; ``n/a`` if not finite."""
    if not math.isfinite(x):
        return "n/a"
    spec = ".1%" if abs(x) < 0.1 else ".0%"
    return format(x, ("+" if sign else "") + spec)


def format_value(value: object) -> str:
    """Format a scenario value: integers as they are, other numbers in ``g`` format."""
    if isinstance(value, numbers.Integral):
        return str(value)
    return f"{float(value):g}"


def _format_template(template: str, value: object) -> str:
    """Format ``value`` with ``template``; a whole-percent template that would print a nonzero
    value as 0% prints it with one decimal instead ("-0.1%", not "-0%")."""
    text = template.format(value)
    if (".0%" in template and text.lstrip("+-") == "0%" and isinstance(value, float)
            and math.isfinite(value) and value != 0):
        text = template.replace(".0%", ".1%").format(value)
    return text


def format_cell(template: str, value: object) -> str:
    """Format a table cell with ``template``; ``n/a`` for None, the value as text if it won't fit.

    >>> format_cell("{:+.0%}", -0.0012), format_cell("{:+.0%}", 0.0), format_cell("{:+.0%}", 0.03)
    ('-0.1%', '+0%', '+3%')
    """
    if value is None:
        return "n/a"
    try:
        return _format_template(template, value)
    except (ValueError, TypeError):
        return str(value)


def format_quantity(value: object, template: str = "{:.4g}") -> str:
    """Format a value for a page: ints with thousands separators, floats by ``template``."""
    if value is None:
        return "n/a"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return str(value)
    if isinstance(value, int):
        return f"{value:,}"
    return _format_template(template, value) if value == value else "n/a"


def wrap_text(text: str, width: int = TEXT_WIDTH, *, indent: str = "") -> str:
    """Wrap each line of ``text`` to ``width`` columns, later lines of a paragraph indented.

    A number keeps the word after it on its line ("24 h", "0.9 orders"), words are
    never split (a hyphenated label stays whole), and blank lines are kept.

    >>> print(wrap_text("bias +0.01 orders per user on a GTE of 0.876", 20, indent="  "))
    bias +0.01 orders
      per user on a GTE
      of 0.876
    """
    out = []
    for line in text.split("\n"):
        # textwrap breaks only at ASCII whitespace, so a no-break space holds a
        # number and the word after it together until the line is printed.
        held = re.sub(r"(\d) ", "\\1\u00a0", line)
        wrapped = textwrap.wrap(held, width, subsequent_indent=indent, break_on_hyphens=False,
                                break_long_words=False)
        out += [w.replace("\u00a0", " ") for w in wrapped] or [""]
    return "\n".join(out)
