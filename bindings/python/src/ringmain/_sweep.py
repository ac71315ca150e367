"""Scenario sweeps: many solves of one network, on all local cores or on a Dask cluster.

Each scenario is a mapping of changes to the base model, applied before its solve and undone after
it (so scenarios never leak into each other):

``demand_factor``
    multiplies every junction's base demand;
``demands``, ``reservoir_heads``
    one value per node (NaN: unchanged) or a mapping of node ids to values;
``statuses``
    a mapping of link ids to "open", "closed" or "automatic", or one status per link;
``pump_speeds``, ``valve_settings``, ``pipe_roughnesses``, ``pipe_diameters``
    one value per link (NaN: unchanged) or a mapping of link ids to values.

Local runs use one model copy per thread (the library releases the GIL while it solves). On a
cluster, the model's text is sent to every worker once (``Client.scatter(..., broadcast=True)``);
each worker process loads it once per thread and solves chunks of scenarios; only arrays come
back.
"""

from __future__ import annotations

import hashlib
import math
import os
import threading
from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray

from .errors import ArgumentTypeError, InvalidValueError, RingmainError, SolveError

if TYPE_CHECKING:
    from ._model import Model

FloatArray = NDArray[np.float64]
Quantity = Literal["head", "pressure", "demand", "flow", "velocity", "headloss"]
NODE_QUANTITIES = ("head", "pressure", "demand")
LINK_QUANTITIES = ("flow", "velocity", "headloss")
_KEYS = (
    "demand_factor",
    "demands",
    "reservoir_heads",
    "statuses",
    "pump_speeds",
    "valve_settings",
    "pipe_roughnesses",
    "pipe_diameters",
)
_ARRAY_KEYS = {
    "demands": ("demands", "set_demands"),
    "reservoir_heads": ("reservoir_heads", "set_reservoir_heads"),
    "pump_speeds": ("pump_speeds", "set_pump_speeds"),
    "valve_settings": ("valve_settings", "set_valve_settings"),
    "pipe_roughnesses": ("pipe_roughnesses", "set_pipe_roughnesses"),
    "pipe_diameters": ("pipe_diameters", "set_pipe_diameters"),
}


@dataclass(frozen=True)
class SweepResults:
    """The results of a sweep: one row per scenario, in the scenarios' order.

    Attributes
    ----------
    values : dict of str to ndarray
        Per quantity asked for, a (scenario × node) or (scenario × link) array in the model's
        units; a scenario that failed (``on_error="record"``) has a row of NaN.
    errors : list of str or None
        The error message of each scenario that failed, None for those that solved.
    node_ids, link_ids : tuple of str
        The columns.
    """

    values: dict[str, FloatArray]
    errors: list[str | None]
    node_ids: tuple[str, ...]
    link_ids: tuple[str, ...]

    def __getitem__(self, quantity: str) -> FloatArray:
        return self.values[quantity]

    def __len__(self) -> int:
        return len(self.errors)


class _Base:
    """A model with its base values, to undo each scenario's changes."""

    def __init__(self, model: Model) -> None:
        self.model = model
        self.base: dict[str, Any] = {}

    def value(self, key: str) -> Any:
        if key not in self.base:
            if key == "statuses":
                self.base[key] = self.model.link_statuses()
            else:
                self.base[key] = getattr(self.model, _ARRAY_KEYS.get(key, ("demands", ""))[0])()
        return self.base[key]

    def apply(self, scenario: Mapping[str, Any]) -> list[str]:
        changed: list[str] = []
        try:
            for key, value in scenario.items():
                if key == "demand_factor":
                    factor = float(value)
                    if not (math.isfinite(factor) and factor >= 0):
                        raise InvalidValueError(0, f"scenario key 'demand_factor' must be a finite number >= 0, found {value!r}")
                    changed.append("demands")
                    self.model.set_demands(self.value("demands") * factor)
                elif key == "statuses":
                    changed.append(key)
                    self.value(key)
                    self.model.set_link_statuses(value)
                else:
                    changed.append(key)
                    self.value(key)
                    getattr(self.model, _ARRAY_KEYS[key][1])(value)
        except BaseException:
            self.undo(changed)
            raise
        return changed

    def undo(self, changed: list[str]) -> None:
        for key in changed:
            if key == "statuses":
                self.model.set_link_statuses(self.base[key])
            else:
                getattr(self.model, _ARRAY_KEYS[key][1])(self.base[key])


def _check_scenarios(scenarios: Sequence[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    if isinstance(scenarios, (str, bytes, Mapping)) or not isinstance(scenarios, Sequence):
        raise ArgumentTypeError(f"argument 'scenarios' must be a sequence of mappings, got {type(scenarios).__name__}")
    out = []
    for i, s in enumerate(scenarios):
        if not isinstance(s, Mapping):
            raise ArgumentTypeError(f"argument 'scenarios[{i}]' must be a mapping, got {type(s).__name__}")
        unknown = [k for k in s if k not in _KEYS]
        if unknown:
            raise InvalidValueError(
                0, f"argument 'scenarios[{i}]': unknown key {unknown[0]!r}; expected some of {', '.join(_KEYS)}"
            )
        out.append(s)
    return out


def _solve_chunk(
    base: _Base, start: int, scenarios: Sequence[Mapping[str, Any]], quantities: Sequence[str], on_error: str
) -> tuple[int, dict[str, FloatArray], list[str | None]]:
    """Solves scenarios one after another on one model; rows of values and error messages."""
    model = base.model
    layout = model.layout()
    widths = {q: len(layout.node_ids) if q in NODE_QUANTITIES else len(layout.link_ids) for q in quantities}
    values: dict[str, FloatArray] = {q: np.full((len(scenarios), widths[q]), np.nan) for q in quantities}
    errors: list[str | None] = []
    attribute = {"head": "heads", "pressure": "pressures", "demand": "demands", "flow": "flows",
                 "velocity": "velocities", "headloss": "headlosses"}
    for row, scenario in enumerate(scenarios):
        changed: list[str] = []
        try:
            changed = base.apply(scenario)
            with model.solve() as results:
                for q in quantities:
                    values[q][row] = getattr(results, attribute[q])
            errors.append(None)
        except RingmainError as e:
            if on_error == "raise":
                raise type(e)(e.status, f"scenario {start + row}: {e.message}") from None
            errors.append(f"scenario {start + row}: {e.message}")
        finally:
            base.undo(changed)
    return start, values, errors


# Models loaded by a worker process, per model text and thread (a model is changed by each solve,
# so threads of one worker do not share one).
_WORKER_MODELS: dict[tuple[str, int], _Base] = {}
_WORKER_LOCK = threading.Lock()


def _worker_chunk(
    text: str, digest: str, start: int, scenarios: Sequence[Mapping[str, Any]], quantities: Sequence[str], on_error: str
) -> tuple[int, dict[str, FloatArray], list[str | None]]:
    """A task run on a Dask worker: loads the model once per worker thread, solves a chunk."""
    from ._model import Model

    key = (digest, threading.get_ident())
    with _WORKER_LOCK:
        base = _WORKER_MODELS.get(key)
    if base is None:
        base = _Base(Model.from_json(text))
        with _WORKER_LOCK:
            _WORKER_MODELS[key] = base
    return _solve_chunk(base, start, scenarios, quantities, on_error)


def sweep(
    model: Model,
    scenarios: Sequence[Mapping[str, Any]],
    client: Any = None,
    *,
    quantities: Sequence[Quantity] = ("pressure", "flow"),
    chunk_size: int | None = None,
    workers: int | None = None,
    on_error: Literal["raise", "record"] = "raise",
) -> SweepResults:
    """Solves many scenarios of one model, on all local cores or on a Dask cluster.

    Parameters
    ----------
    model : Model
        The base model; it is not changed.
    scenarios : sequence of mappings
        The changes of each scenario (see the module documentation: ``demand_factor``,
        ``demands``, ``statuses``, ``pump_speeds``, ``valve_settings``, ``pipe_roughnesses``,
        ``pipe_diameters``, ``reservoir_heads``).
    client : dask.distributed.Client, optional
        Runs the sweep on that client's cluster; None runs it here on all cores.
    quantities : sequence of str
        What to return per scenario: any of "head", "pressure", "demand" (per node), "flow",
        "velocity", "headloss" (per link).
    chunk_size : int, optional
        Scenarios per task (default: an even split, four tasks per worker or thread).
    workers : int, optional
        Local threads (default: one per core); ignored with a client.
    on_error : {"raise", "record"}
        Raise the first failure (naming its scenario), or record each failure's message in
        ``errors`` and leave its row NaN.

    Returns
    -------
    SweepResults

    Examples
    --------
    >>> import ringmain
    >>> m = ringmain.Model.new()
    >>> _ = m.add_reservoir("Spring", head=60.0)
    >>> _ = m.add_junction("J-1", elevation=20.0, demand=4.0)
    >>> _ = m.add_pipe("P-1", "Spring", "J-1", length=500.0, diameter=150.0, roughness=120.0)
    >>> out = ringmain.sweep(m, [{"demand_factor": f} for f in (0.5, 1.0, 2.0)], quantities=["flow"])
    >>> out["flow"][:, 0].tolist()
    [2.0, 4.0, 8.0]
    """
    from ._model import Model

    if not isinstance(model, Model):
        raise ArgumentTypeError(f"argument 'model' must be a ringmain.Model, got {type(model).__name__}")
    items = _check_scenarios(scenarios)
    wanted: list[str] = list(quantities)
    for q in wanted:
        if q not in NODE_QUANTITIES + LINK_QUANTITIES:
            raise InvalidValueError(0, f"argument 'quantities': unknown quantity {q!r}")
    if on_error not in ("raise", "record"):
        raise InvalidValueError(0, f"argument 'on_error' must be 'raise' or 'record', found {on_error!r}")
    layout = model.layout()
    n = len(items)
    if client is None:
        lanes = workers or os.cpu_count() or 1
    else:
        lanes = max(1, sum(client.nthreads().values()))
    size = chunk_size or max(1, math.ceil(n / (4 * lanes)))
    if isinstance(size, bool) or not isinstance(size, int) or size < 1:
        raise InvalidValueError(0, f"argument 'chunk_size' must be a positive int, found {chunk_size!r}")
    chunks = [(s, items[s : s + size]) for s in range(0, n, size)]
    parts: list[tuple[int, dict[str, FloatArray], list[str | None]]]
    if client is None:
        local = threading.local()
        copies: list[Model] = []
        copies_lock = threading.Lock()

        def run(chunk: tuple[int, list[Mapping[str, Any]]]) -> tuple[int, dict[str, FloatArray], list[str | None]]:
            base = getattr(local, "base", None)
            if base is None:
                copy = model.copy()
                with copies_lock:
                    copies.append(copy)
                base = _Base(copy)
                local.base = base
            return _solve_chunk(base, chunk[0], chunk[1], wanted, on_error)

        try:
            with ThreadPoolExecutor(max_workers=max(1, min(lanes, len(chunks)))) as pool:
                parts = list(pool.map(run, chunks))
        finally:
            for copy in copies:
                copy.close()
    else:
        text = model.to_json()
        digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
        [shared] = client.scatter([text], broadcast=True)
        futures = [
            client.submit(_worker_chunk, shared, digest, s, chunk, wanted, on_error, pure=False)
            for s, chunk in chunks
        ]
        parts = client.gather(futures)
    widths = {q: len(layout.node_ids) if q in NODE_QUANTITIES else len(layout.link_ids) for q in wanted}
    values: dict[str, FloatArray] = {q: np.empty((n, widths[q])) for q in wanted}
    errors: list[str | None] = [None] * n
    for start, part, part_errors in parts:
        for q in wanted:
            values[q][start : start + len(part_errors)] = part[q]
        errors[start : start + len(part_errors)] = part_errors
    return SweepResults(values=values, errors=errors, node_ids=layout.node_ids, link_ids=layout.link_ids)


__all__ = ["SolveError", "SweepResults", "sweep"]
