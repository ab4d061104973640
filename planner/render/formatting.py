"""Number and text formatting shared by the renderers (presentation only)."""
from __future__ import annotations

import math


def num(value, digits: int = 4) -> str:
    """A number for a table: ``digits`` significant digits, thousands kept readable."""
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int):
        return f"{value:,}"
    if not math.isfinite(value):
        return "n/a"
    if value == 0:
        return "0"
    if float(value).is_integer() and abs(value) < 1e6:
        return f"{int(value):,}"
    magnitude = abs(value)
    if magnitude >= 1e6 or magnitude < 1e-3:
        return f"{value:.{digits - 1}e}"
    decimals = max(0, digits - 1 - int(math.floor(math.log10(magnitude))))
    return f"{value:,.{decimals}f}"


def p(value) -> str:
    """A p-value with its relation sign: '= 0.031', '< 1e-16'."""
    if value is None:
        return "n/a"
    if value < 1e-16:
        return "< 1e-16"
    return "= " + (f"{value:.3g}" if value >= 1e-3 else f"{value:.2e}")


def pct(value, digits: int = 1) -> str:
    if value is None:
        return "n/a"
    return f"{100.0 * value:.{digits}f}%"


def delimiter(value: str) -> str:
    return {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}.get(value, repr(value))


def names(items, limit: int = 12) -> str:
    """A list of names for a sentence, cut after ``limit`` with the count of the rest."""
    items = list(items or [])
    shown = ", ".join(str(i) for i in items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")


def plan_name(plan_id: str) -> str:
    from ..analysis.alternatives import PLAN_NAMES

    return PLAN_NAMES.get(plan_id, str(plan_id).replace("_", " "))


class Formatters:
    """The formatting helpers as one object the templates receive as ``fmt``."""

    num = staticmethod(num)
    pct = staticmethod(pct)
    p = staticmethod(p)
    names = staticmethod(names)
    plan_name = staticmethod(plan_name)
    delimiter = staticmethod(delimiter)
