"""``njit`` that imports numba only when a compiled function is first called.

Importing numba and making its first call cost about 0.5 s of a fresh process
(numba itself, scipy.linalg which numba's numpy support loads, the CPU target's
set-up), before any kernel is loaded from the cache. The static job's kernels
also exist in C (:mod:`noisecal._native`); where that library was built, a run
calls none of the numba kernels and should not pay for numba at all. Modules
therefore decorate with this ``njit``: the function stays plain Python until
first called, and then every function decorated so far becomes numba's
dispatcher, in its module's namespace too, so that compiled functions calling
one another see dispatchers, as they would with ``numba.njit``.
"""

from __future__ import annotations

import threading

_PENDING: list = []
_LOCK = threading.Lock()


class LazyKernel:
    """A function to be compiled by ``numba.njit(**options)`` on its first call.

    Attributes
    ----------
    py_func : callable
        The Python function.
    """

    def __init__(self, func, options: dict):
        self.py_func = func
        self._options = options
        self._dispatcher = None
        self.__name__ = func.__name__
        self.__qualname__ = func.__qualname__
        self.__doc__ = func.__doc__
        self.__module__ = func.__module__
        self.__wrapped__ = func

    @property
    def dispatcher(self):
        """numba's dispatcher for this function (numba is imported here)."""
        if self._dispatcher is None:
            _materialise()
        return self._dispatcher

    def __call__(self, *args):
        return self.dispatcher(*args)

    def __getattr__(self, name):
        # Dispatcher attributes (signatures, inspect_types, …) on demand.
        if name.startswith("_"):
            raise AttributeError(name)
        return getattr(self.dispatcher, name)


def njit(*args, **options):
    """``numba.njit`` with the import and the decoration deferred to the first call.

    Used as ``@njit(cache=True, nogil=True)`` (options as numba's) or bare ``@njit``.
    """
    def decorate(func):
        kernel = LazyKernel(func, options)
        with _LOCK:
            _PENDING.append(kernel)
        return kernel

    if args and callable(args[0]) and not options:
        return decorate(args[0])
    return decorate


def _materialise() -> None:
    """Make every pending function numba's dispatcher, and every name bound to a
    pending function in their modules' namespaces the dispatcher, before anything is
    compiled (numba reads a compiled function's globals when it compiles it)."""
    with _LOCK:
        if not _PENDING:
            return
        import numba

        pending = list(_PENDING)
        for kernel in pending:
            if kernel._dispatcher is None:
                kernel._dispatcher = numba.njit(**kernel._options)(kernel.py_func)
        # Every LazyKernel not yet compiled is pending (decoration appends under the
        # lock), so each one found below already has its dispatcher.
        for kernel in pending:
            space = kernel.py_func.__globals__
            for name, value in list(space.items()):
                if isinstance(value, LazyKernel):
                    space[name] = value._dispatcher
        _PENDING.clear()
