"""The project's one error type for bad input."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input from a user: a spec, an argument, a state or an operator.

    The message always names the offending argument (or spec key path) and, where they
    are few, the allowed values. The command line turns it into exit code 2.
    """
