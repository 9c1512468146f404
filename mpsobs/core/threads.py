"""Thread counts of the library's own linear-algebra kernels.

The kernels (TEBD layers, the estimators, the Gibbs purification, DMRG) do many small
dense products and decompositions. On few cores a multi-threaded BLAS spends more time
waking and synchronising threads than computing on such matrices (measured in
``scripts/bench_threads.py``), so each kernel runs under a BLAS thread limit
(:mod:`threadpoolctl`) chosen from the size of its matrices: one thread below
:data:`SMALL_BOND`, the BLAS library's own count from there on. The limit holds only
while the kernel computes; generators (:func:`mpsobs.evolve`) release it whenever they
hand a snapshot to the caller (TEBD chooses the count by the bond dimension at the start
of each interval between two requested times). Setting and restoring a limit costs about
0.1-0.4 ms, so it is done per kernel call, not per matrix operation.

The choice, first match wins:

1. :func:`set_threads` / :func:`using_threads` in this process;
2. the environment variable ``MPSOBS_THREADS``;
3. an explicit ``OMP_NUM_THREADS``, ``OPENBLAS_NUM_THREADS`` or ``MKL_NUM_THREADS``
   in the environment: the library leaves BLAS as the user set it ("blas");
4. otherwise the size rule ("auto").

A setting is a positive integer (that many threads in every kernel), ``"auto"`` (the
size rule) or ``"blas"`` (no limit: BLAS's own count).
"""

from __future__ import annotations

import contextlib
import functools
import inspect
import os
import threading
from collections.abc import Callable, Iterator

import numpy as np

from mpsobs.core.errors import InputError

__all__ = ["set_threads", "using_threads", "threads_setting", "threads_for",
           "kernel_threads", "limits_threads", "state_size", "SMALL_BOND", "ENV_VAR",
           "BLAS_ENV"]
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports

#: Environment variable of the library's own thread setting.
ENV_VAR = "MPSOBS_THREADS"
#: Environment variables by which a user sets the BLAS/OpenMP thread count directly.
BLAS_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
#: Kernels on matrices smaller than this (a bond dimension, or a dense dimension) run on
#: one thread under "auto". On the 2-core development machine (shared) two BLAS threads
#: were 5-35x slower than one at every bond measured, 16..128 (scripts/bench_threads.py),
#: so the rule keeps one thread beyond them; machines with many idle cores may gain from
#: set_threads("blas") or a count at bonds of several hundred.
SMALL_BOND = 512

_lock = threading.Lock()
_setting: int | str | None = None   # from set_threads; None: not set in this process
_controller = None


def _parse(value, name: str) -> int | str:
    if isinstance(value, str):
        text = value.strip().lower()
        if text in ("auto", "blas"):
            return text
        if text.isdigit() and int(text) >= 1:
            return int(text)
    elif (isinstance(value, int | np.integer) and not isinstance(value, bool)
          and value >= 1):
        return int(value)
    raise InputError(f"{name}: expected a positive integer, 'auto' or 'blas', got {value!r}")


def set_threads(count: int | str | None) -> int | str | None:
    """Set the thread count of the library's kernels for this process; returns the
    previous setting.

    ``count``: a positive integer (every kernel runs on that many BLAS threads),
    ``"auto"`` (one thread for small matrices, BLAS's own count for large ones),
    ``"blas"`` (never limit) or None (back to ``MPSOBS_THREADS`` / the environment).
    """
    global _setting
    new = None if count is None else _parse(count, "count")
    with _lock:
        previous, _setting = _setting, new
    return previous


@contextlib.contextmanager
def using_threads(count: int | str | None) -> Iterator[None]:
    """:func:`set_threads` for the duration of a ``with`` block."""
    previous = set_threads(count)
    try:
        yield
    finally:
        set_threads(previous)


def threads_setting() -> int | str:
    """The setting in force: an integer, "auto" or "blas" (see the module docstring)."""
    if _setting is not None:
        return _setting
    env = os.environ.get(ENV_VAR)
    if env is not None and env.strip():
        return _parse(env, ENV_VAR)
    if any(os.environ.get(name, "").strip() for name in BLAS_ENV):
        return "blas"
    return "auto"


def threads_for(size: int) -> int | None:
    """BLAS threads for a kernel on matrices of about ``size`` x ``size`` (a bond
    dimension); None means "leave BLAS as it is"."""
    setting = threads_setting()
    if setting == "blas":
        return None
    if setting == "auto":
        return 1 if size < SMALL_BOND else None
    return int(setting)


def _blas():
    """One threadpoolctl controller for the BLAS libraries numpy and scipy load."""
    global _controller
    if _controller is None:
        import scipy.linalg  # noqa: F401  (loads scipy's own BLAS before the scan)
        from threadpoolctl import ThreadpoolController

        _controller = ThreadpoolController()
    return _controller


@contextlib.contextmanager
def kernel_threads(size: int) -> Iterator[None]:
    """Run the enclosed kernel work under the thread limit for matrices of ``size``
    (:func:`threads_for`); the previous counts are restored on exit."""
    count = threads_for(size)
    if count is None:
        yield
        return
    with _blas().limit(limits=count, user_api="blas"):
        yield


def state_size(state) -> int:
    """The matrix size a kernel on ``state`` works with: the largest bond dimension of an
    MPS (mpsobs or quimb), the dimension of a dense state."""
    if isinstance(state, np.ndarray):
        return int(state.shape[0]) if state.ndim else 1
    bond = getattr(state, "max_bond", None)
    if callable(bond):  # quimb's MatrixProductState.max_bond()
        bond = bond()
    return int(bond) if isinstance(bond, int | np.integer) else SMALL_BOND


def limits_threads(size: Callable[[inspect.BoundArguments], int]) -> Callable:
    """Decorator: run the function under :func:`kernel_threads` of
    ``size(bound_arguments)`` (the call's arguments bound to its signature, defaults
    applied). An argument that does not bind is left to the function to report."""
    def wrap(func: Callable) -> Callable:
        signature = inspect.signature(func)

        @functools.wraps(func)
        def limited(*args, **kwargs):
            try:
                bound = signature.bind(*args, **kwargs)
            except TypeError:
                return func(*args, **kwargs)
            bound.apply_defaults()
            n = size(bound)
            with kernel_threads(n if isinstance(n, int | np.integer) else SMALL_BOND):
                return func(*args, **kwargs)

        return limited

    return wrap
