"""ringmain: flows and pressures in looped water-distribution networks, from Python.

A layer over the ringmain C library (``libringmain``, shipped inside this package) through
ctypes::

    import ringmain

    with ringmain.Model.load("examples/hillside.toml") as model:
        results = model.solve()
        print(results.node_pressure("J-109"), results.units["pressure"])
        model.set_demands(model.demands() * 1.5)      # every demand in one call
        print(model.solve().pressures.min())           # numpy arrays

Values are in the model's own units. Errors raise subclasses of ``RingmainError`` with the
library's message, which names the file, element and key; where a standard exception fits they
are also one (``NotFoundError`` is a ``KeyError``, ``InvalidValueError`` a ``ValueError``,
``ArgumentTypeError`` and ``WrongKindError`` are ``TypeError``).

Threads: :func:`set_threads` sizes the library's worker pool (per process, made anew in a forked
child). :func:`sweep` solves many scenarios on all cores or on a Dask cluster.

Results are only as good as the model and its data; designs must be checked by a licensed engineer
against local codes and the utility's standards.
"""

from ._ffi import LibraryNotFound
from ._model import Layout, Model, live_handles, version
from ._results import Results, Tables, state_text
from ._simulation import Simulation
from ._sweep import SweepResults, sweep
from ._threads import set_threads, threads
from .errors import (
    ArgumentTypeError,
    ElementIndexError,
    InvalidValueError,
    ModelError,
    NotFoundError,
    RingmainError,
    SolveError,
    WrongKindError,
)

__all__ = [
    "ArgumentTypeError",
    "ElementIndexError",
    "InvalidValueError",
    "LibraryNotFound",
    "Layout",
    "Model",
    "ModelError",
    "NotFoundError",
    "Results",
    "RingmainError",
    "Simulation",
    "SolveError",
    "SweepResults",
    "Tables",
    "WrongKindError",
    "live_handles",
    "set_threads",
    "state_text",
    "sweep",
    "threads",
    "version",
]
__version__ = "0.1.0"
