"""Short printouts: the pieces every public object's one-line ``repr`` is made of."""

from __future__ import annotations

import math

__all__ = ["short", "number", "with_error", "size_range"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


def short(text: str, limit: int = 80) -> str:
    """``text`` cut to at most ``limit`` characters (an ellipsis marks the cut)."""
    text = str(text)
    return text if len(text) <= limit else text[:limit - 3] + "..."


def number(value) -> str:
    """A number in at most six significant digits (None as "-")."""
    if value is None:
        return "-"
    if isinstance(value, int) and not isinstance(value, bool):
        return str(value)
    return f"{float(value) + 0.0:.6g}"  # + 0.0: no "-0"


def with_error(value: float, error: float) -> str:
    """``value +- error`` rounded at the error's first significant digit (two when it
    starts with 1); an error of 0 (exact) or not finite prints the value alone."""
    value, error = float(value), float(error)
    if not (error > 0 and math.isfinite(error) and math.isfinite(value)):
        return number(value)
    exponent = math.floor(math.log10(error))
    digits = max(0, -exponent + (1 if f"{error:e}"[0] == "1" else 0))
    return f"{value:.{digits}f} +- {error:.{digits}f}"


def size_range(values) -> str:
    """"4" when all values are equal, "2..4" (min..max) otherwise."""
    values = list(values)
    if not values:
        return "-"
    lo, hi = min(values), max(values)
    return f"{lo}" if lo == hi else f"{lo}..{hi}"
