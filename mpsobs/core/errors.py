"""The project's one error type for bad input (and its kind for work beyond a memory
limit), and the checks of plain arguments."""

from __future__ import annotations

import math
from collections.abc import Collection

import numpy as np

__all__ = ["InputError", "TooLargeError", "finite_number", "integer", "one_of", "seed_value"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports


class InputError(ValueError):
    """Bad input from a user: a spec, an argument, a state or an operator.

    The message always names the offending argument (or spec key path) and, where they
    are few, the allowed values. The command line turns it into exit code 2.
    """


class TooLargeError(InputError):
    """Input whose evaluation would need more memory than the library allows itself (the
    message names the setting that shrinks it). A run's equilibrium reference turns it
    into NaN with a warning instead of failing the point."""


def finite_number(value, name: str) -> float:
    """``value`` as a finite float, or an InputError naming ``name``.

    Real numbers only (Python or numpy ints and floats, 0-d real arrays); strings,
    booleans and complex numbers are refused, not converted.
    """
    if (isinstance(value, bool | np.bool_ | str | bytes)
            or not isinstance(value, int | float | np.integer | np.floating | np.ndarray)
            or (isinstance(value, np.ndarray) and (value.ndim or value.dtype.kind not in "iuf"))):
        raise InputError(f"{name}: expected a number, got {value!r}")
    out = float(value)
    if not math.isfinite(out):
        raise InputError(f"{name}: expected a finite number, got {value!r}")
    return out


def integer(value, name: str, minimum: int | None = None) -> int:
    """``value`` as an int (Python or numpy integer, not bool), at least ``minimum``."""
    if isinstance(value, bool | np.bool_) or not isinstance(value, int | np.integer):
        floor = "" if minimum is None else f" >= {minimum}"
        raise InputError(f"{name}: expected an integer{floor}, got {value!r}")
    if minimum is not None and value < minimum:
        raise InputError(f"{name}: expected an integer >= {minimum}, got {value!r}")
    return int(value)


def one_of(value, name: str, allowed: Collection) -> object:
    """``value`` if it is one of ``allowed``: strings match strings, integers match
    integers (not booleans or floats), None matches None."""
    def same(a) -> bool:
        if a is None or isinstance(a, bool):
            return value is a
        if isinstance(a, str):
            return isinstance(value, str) and value == a
        return (not isinstance(value, bool | np.bool_) and isinstance(value, int | np.integer)
                and value == a)

    if not any(same(a) for a in allowed):
        raise InputError(f"{name}: expected one of {', '.join(map(repr, allowed))}, "
                         f"got {value!r}")
    return value


def check_seed(seed, name: str = "seed") -> None:
    """Refuse a seed that :func:`numpy.random.default_rng` does not take: the one seed
    rule of the package. Accepted: None (fresh entropy), a non-negative integer, a
    sequence of them, a numpy SeedSequence or Generator; refused (InputError naming
    ``name``): strings, floats, booleans and anything numpy refuses."""
    expected = ("expected an integer >= 0, a sequence of them, a numpy SeedSequence or "
                "Generator, or None")
    if isinstance(seed, str | bytes | float | bool | np.bool_ | np.floating):
        raise InputError(f"{name}: {expected}; got {seed!r}")
    try:
        np.random.default_rng(seed)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: {expected}; got {seed!r} ({exc})") from None


def seed_value(value, name: str = "seed"):
    """``value`` if it is a seed (:func:`check_seed`), for ``np.random.default_rng``."""
    check_seed(value, name)
    return value
