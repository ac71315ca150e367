"""The library's worker threads."""

from __future__ import annotations

from ctypes import byref, c_size_t

import numpy as np

from . import _ffi
from .errors import ArgumentTypeError, InvalidValueError, check


def set_threads(threads: int) -> None:
    """Sets the number of worker threads the library uses in this process.

    Parameters
    ----------
    threads : int
        0 for one per core (the default), else 1 to 4096.

    Notes
    -----
    The threads serve :meth:`Model.solve` (the first solve of a network, and every solve of a
    network of more than a few thousand links) and :meth:`Model.simulate`; everything else runs on
    the calling thread. The pool belongs to the process: a child made by ``fork`` (a
    ``multiprocessing`` pool's default start method on Linux before Python 3.14) gets a new pool of
    this size at its first solve, so solving in forked workers after solving in the parent works.

    Examples
    --------
    >>> import ringmain
    >>> ringmain.set_threads(2)
    >>> ringmain.threads()
    2
    >>> ringmain.set_threads(0)
    """
    if isinstance(threads, bool) or not isinstance(threads, (int, np.integer)):
        raise ArgumentTypeError(f"argument 'threads' must be an int, got {type(threads).__name__}")
    n = int(threads)
    if not 0 <= n <= 4096:
        raise InvalidValueError(0, f"argument 'threads' must be 0 (one per core) to 4096, found {n}")
    check(_ffi.lib.ringmain_set_threads(n))


def threads() -> int:
    """The number of worker threads the library uses in this process."""
    n = c_size_t()
    check(_ffi.lib.ringmain_get_threads(byref(n)))
    return n.value
