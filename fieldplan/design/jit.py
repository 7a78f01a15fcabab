"""Compiled kernels that cost nothing until first used.

Importing numba takes a few hundred milliseconds, more than a whole small grid plan. A module
declares its kernels with :func:`kernel` instead of ``numba.njit``; the first call of any of them
imports numba and compiles (or loads from the on-disk cache) every kernel of that module at once,
replacing the module's globals, so kernels that call each other see compiled functions.
A plan that never calls a kernel never imports numba.
"""

from __future__ import annotations

import functools
import sys
import threading
from collections.abc import Callable
from typing import Any

__all__ = ["kernel", "compile_module"]

# Kernels waiting to be compiled, per module, in definition order.
_PENDING: dict[str, list[tuple[Callable[..., Any], dict[str, Any]]]] = {}
_LOCK = threading.Lock()

# Options every kernel gets: the compiled code is cached beside the module (__pycache__) so only
# the first run on a machine pays for compilation; nogil lets threads run kernels side by side.
_DEFAULTS = {"cache": True, "nogil": True}


def kernel(func: Callable[..., Any] | None = None, /, **options: Any) -> Any:
    """Declare a numba kernel, compiled on first use.

    Parameters
    ----------
    func : callable
        The kernel (numba nopython-compatible Python).
    **options
        Extra options for ``numba.njit`` (``cache`` and ``nogil`` are on by default).

    Returns
    -------
    callable
        A stand-in that compiles the module's kernels on its first call and then calls the
        compiled kernel.
    """

    def declare(f: Callable[..., Any]) -> Callable[..., Any]:
        _PENDING.setdefault(f.__module__, []).append((f, {**_DEFAULTS, **options}))
        module_name, name = f.__module__, f.__name__

        @functools.wraps(f)
        def first_call(*args: Any, **kwargs: Any) -> Any:
            compile_module(module_name)
            return getattr(sys.modules[module_name], name)(*args, **kwargs)

        first_call.py_func = f  # type: ignore[attr-defined]  # as numba dispatchers have
        return first_call

    return declare(func) if func is not None else declare


def compile_module(module_name: str) -> None:
    """Replace every pending kernel of ``module_name`` by its numba dispatcher.

    Parameters
    ----------
    module_name : str
        Dotted name of a module that declared kernels with :func:`kernel`.
    """
    with _LOCK:
        pending = _PENDING.pop(module_name, None)
        if not pending:
            return
        from numba import njit

        module = sys.modules[module_name]
        for f, options in pending:
            setattr(module, f.__name__, njit(**options)(f))
