"""ringmain: flows and pressures in looped water-distribution networks, from Python.

A thin layer over the ringmain C library (``libringmain``) through ctypes::

    import ringmain

    with ringmain.Model.load("examples/hillside.toml") as model:
        results = model.solve()
        print(results.node_pressure("J-109"), results.units["pressure"])
        model.set_demand("J-109", 3.0)
        print(model.solve().node_pressure("J-109"))

Values are in the model's own units. Errors raise ``ModelError`` or ``SolveError`` with the
library's message, which names the file, element and key.

Results are only as good as the model and its data; designs must be checked by a licensed engineer
against local codes and the utility's standards.
"""

from ._ffi import LibraryNotFound
from ._model import Layout, Model, live_handles, version
from ._results import Results, state_text
from .errors import ModelError, RingmainError, SolveError

__all__ = [
    "LibraryNotFound",
    "Layout",
    "Model",
    "ModelError",
    "Results",
    "RingmainError",
    "SolveError",
    "live_handles",
    "state_text",
    "version",
]
__version__ = "0.1.0"
