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


#: An error at most this fraction of max(1, |value|) counts as exact up to rounding.
EXACT_RTOL = 1e-12


def with_error(value: float, error: float) -> str:
    """``value +- error``: the one format of a number with its error.

    The error is rounded to one significant digit, two when that digit is 1 (so that
    the rounding changes it by at most about 5 %; a rule of the trade, simplified from
    the Particle Data Group's, Review of Particle Physics, Introduction, from memory),
    the value to the same decimal. A value that is not finite prints as ``nan``/``inf``; an error
    that is 0, not finite or at most EXACT_RTOL * max(1, |value|) (exact up to
    rounding) prints the value alone in six significant digits.
    """
    value, error = float(value), float(error)
    if not math.isfinite(value):
        return number(value)
    if not (math.isfinite(error) and error > EXACT_RTOL * max(1.0, abs(value))):
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
