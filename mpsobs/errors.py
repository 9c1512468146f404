"""The project's one error type for bad input."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input from a user: a spec, an argument, a state or an operator.

    The message always names the offending argument (or spec key path) and, where they
    are few, the allowed values. The command line turns it into exit code 2.
    """


def finite_number(value, name: str) -> float:
    """``value`` as a finite float, or an InputError naming ``name``."""
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a number, got {value!r}") from None
    if out != out or out in (float("inf"), float("-inf")):
        raise InputError(f"{name}: expected a finite number, got {value!r}")
    return out
