"""The network model."""

from __future__ import annotations

import ctypes
import math
import os
from ctypes import byref, c_bool, c_double, c_size_t, c_uint32, c_void_p
from dataclasses import dataclass
from typing import Iterable, Sequence, Union

from . import _ffi
from ._handle import Handle
from ._results import Results
from .errors import check

lib = _ffi.lib
C = _ffi.CONSTANTS

#: A node or link given by its id or by its index.
Element = Union[str, int]

LENGTH_UNITS = {"m": 0, "ft": 1}
DIAMETER_UNITS = {"mm": 0, "m": 1, "in": 2, "ft": 3}
FLOW_UNITS = {"L/s": 0, "m3/s": 1, "m3/h": 2, "ML/d": 3, "gpm": 4, "cfs": 5, "Mgal/d": 6}
PRESSURE_UNITS = {"m": 0, "kPa": 1, "bar": 2, "psi": 3, "ft": 4}
ROUGHNESS_UNITS = {"mm": 0, "m": 1, "in": 2, "ft": 3}
HEADLOSS_LAWS = {"hazen-williams": 0, "darcy-weisbach": 1}
VALVE_TYPES = {"pressure-reducing": 0, "pressure-sustaining": 1, "flow-control": 2, "throttle": 3}
LINK_STATUSES = {"open": 0, "closed": 1, "automatic": 2}
NODE_KINDS = {0: "junction", 1: "reservoir", 2: "tank"}
LINK_KINDS = {0: "pipe", 1: "pump", 2: "valve"}
QUANTITIES = {"length": 0, "diameter": 1, "flow": 2, "pressure": 3, "roughness": 4, "velocity": 5, "power": 6}


def _code(table: dict[str, int], value: str, what: str) -> int:
    try:
        return table[value]
    except KeyError:
        choices = ", ".join(repr(k) for k in table)
        raise ValueError(f"unknown {what} {value!r}; expected one of {choices}") from None


def _text(call, *args) -> str:
    """Calls a function that fills a text buffer (…, buf, len, needed) and returns the text."""
    needed = c_size_t(0)
    size = 64
    while True:
        buf = ctypes.create_string_buffer(size)
        code = call(*args, buf, size, byref(needed))
        if code != _ffi.BUFFER_TOO_SMALL:
            check(code)
            return buf.value.decode("utf-8")
        size = needed.value


def _doubles(values: Sequence[float]):
    return (c_double * len(values))(*values)


@dataclass(frozen=True)
class Layout:
    """The ids, kinds and ends of one network structure, shared by the results solved on it."""

    node_ids: tuple[str, ...]
    node_kinds: tuple[str, ...]
    elevations: tuple[float, ...]
    link_ids: tuple[str, ...]
    link_kinds: tuple[str, ...]
    link_from: tuple[str, ...]
    link_to: tuple[str, ...]
    units: dict[str, str]

    def __post_init__(self) -> None:
        object.__setattr__(self, "node_index", {n: i for i, n in enumerate(self.node_ids)})
        object.__setattr__(self, "link_index", {k: i for i, k in enumerate(self.link_ids)})


class Model(Handle):
    """A water-distribution network model, with the solver that keeps its analysis between solves.

    Values go in and come out in the model's own units: those of the ``[units]`` table of the file
    or text it was read from, or those given to ``Model.new`` (``units`` lists them). Nodes and
    links are named by id (``str``) or by index (``int``, in the order they were read or added).

    Close it with ``close()`` or a ``with`` block; it is also freed when collected. A model is not
    safe to change from two threads at once; distinct models may be used from distinct threads.
    """

    _free = staticmethod(lib.ringmain_model_free)
    _what = "model"

    def __init__(self, pointer: int) -> None:
        super().__init__(pointer)
        self._layout: Layout | None = None

    # -- making models ------------------------------------------------------------------------

    @classmethod
    def _made(cls, call, *args) -> "Model":
        out = c_void_p()
        check(call(*args, byref(out)))
        return cls(out.value)

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> "Model":
        """Reads a model file (.toml or .json). Raises ``ModelError`` naming the file, element and key."""
        return cls._made(lib.ringmain_model_load, os.fsencode(path))

    @classmethod
    def from_toml(cls, text: str) -> "Model":
        """Reads a model from TOML text."""
        data = text.encode("utf-8")
        return cls._made(lib.ringmain_model_from_toml, data, len(data))

    @classmethod
    def from_json(cls, text: str) -> "Model":
        """Reads a model from JSON text."""
        data = text.encode("utf-8")
        return cls._made(lib.ringmain_model_from_json, data, len(data))

    @classmethod
    def new(
        cls,
        *,
        length: str = "m",
        diameter: str = "mm",
        flow: str = "L/s",
        pressure: str = "m",
        roughness: str = "mm",
        headloss: str = "hazen-williams",
    ) -> "Model":
        """An empty model to build with ``add_*``, in the given units (names as in model files)."""
        return cls._made(
            lib.ringmain_model_new,
            _code(LENGTH_UNITS, length, "length unit"),
            _code(DIAMETER_UNITS, diameter, "diameter unit"),
            _code(FLOW_UNITS, flow, "flow unit"),
            _code(PRESSURE_UNITS, pressure, "pressure unit"),
            _code(ROUGHNESS_UNITS, roughness, "roughness unit"),
            _code(HEADLOSS_LAWS, headloss, "head-loss law"),
        )

    def copy(self) -> "Model":
        """An independent copy (for example, one per thread), warm start setting included."""
        copy = type(self)._made(lib.ringmain_model_clone, self._ptr)
        copy._warm_start = self.warm_start
        return copy

    # -- what the model is --------------------------------------------------------------------

    @property
    def node_count(self) -> int:
        """Number of nodes."""
        n = c_size_t()
        check(lib.ringmain_model_node_count(self._ptr, byref(n)))
        return n.value

    @property
    def link_count(self) -> int:
        """Number of links."""
        n = c_size_t()
        check(lib.ringmain_model_link_count(self._ptr, byref(n)))
        return n.value

    @property
    def title(self) -> str:
        """The model's title ("" when it has none)."""
        return _text(lib.ringmain_model_title, self._ptr)

    @property
    def units(self) -> dict[str, str]:
        """The unit label of each quantity: length, diameter, flow, pressure, roughness (empty under
        Hazen–Williams), velocity and power."""
        return {q: _text(lib.ringmain_model_unit_label, self._ptr, code) for q, code in QUANTITIES.items()}

    @property
    def headloss(self) -> str:
        """The friction law: "hazen-williams" or "darcy-weisbach"."""
        code = c_uint32()
        check(lib.ringmain_model_get_headloss(self._ptr, byref(code)))
        return {v: k for k, v in HEADLOSS_LAWS.items()}[code.value]

    def node_index(self, node: Element) -> int:
        """The index of a node given by id (or an index, checked)."""
        if isinstance(node, int):
            if not 0 <= node < self.node_count:
                raise IndexError(f"node index {node} is out of range (the model has {self.node_count} nodes)")
            return node
        i = c_size_t()
        check(lib.ringmain_model_node_index(self._ptr, node.encode("utf-8"), byref(i)))
        return i.value

    def link_index(self, link: Element) -> int:
        """The index of a link given by id (or an index, checked)."""
        if isinstance(link, int):
            if not 0 <= link < self.link_count:
                raise IndexError(f"link index {link} is out of range (the model has {self.link_count} links)")
            return link
        k = c_size_t()
        check(lib.ringmain_model_link_index(self._ptr, link.encode("utf-8"), byref(k)))
        return k.value

    def node_ids(self, kind: str | None = None) -> list[str]:
        """Ids of every node, or only of one kind ("junction", "reservoir" or "tank")."""
        layout = self.layout()
        return [n for n, k in zip(layout.node_ids, layout.node_kinds) if kind is None or k == kind]

    def link_ids(self, kind: str | None = None) -> list[str]:
        """Ids of every link, or only of one kind ("pipe", "pump" or "valve")."""
        layout = self.layout()
        return [n for n, k in zip(layout.link_ids, layout.link_kinds) if kind is None or k == kind]

    def node_kind(self, node: Element) -> str:
        """"junction", "reservoir" or "tank"."""
        return self.layout().node_kinds[self.node_index(node)]

    def link_kind(self, link: Element) -> str:
        """"pipe", "pump" or "valve"."""
        return self.layout().link_kinds[self.link_index(link)]

    def link_nodes(self, link: Element) -> tuple[str, str]:
        """The ids of the link's start and end nodes (flow is positive from start to end)."""
        layout = self.layout()
        k = self.link_index(link)
        return layout.link_from[k], layout.link_to[k]

    def layout(self) -> Layout:
        """Ids, kinds, elevations and ends of the current structure (rebuilt after ``add_*``)."""
        if self._layout is None:
            ptr = self._ptr
            n, m = self.node_count, self.link_count
            node_ids = tuple(_text(lib.ringmain_model_node_id, ptr, i) for i in range(n))
            kinds = []
            elevations = []
            for i in range(n):
                code, z = c_uint32(), c_double()
                check(lib.ringmain_model_node_kind(ptr, i, byref(code)))
                check(lib.ringmain_model_get_elevation(ptr, i, byref(z)))
                kinds.append(NODE_KINDS.get(code.value, "unknown"))
                elevations.append(z.value)
            link_ids = tuple(_text(lib.ringmain_model_link_id, ptr, k) for k in range(m))
            link_kinds, starts, ends = [], [], []
            for k in range(m):
                code, a, b = c_uint32(), c_size_t(), c_size_t()
                check(lib.ringmain_model_link_kind(ptr, k, byref(code)))
                check(lib.ringmain_model_link_nodes(ptr, k, byref(a), byref(b)))
                link_kinds.append(LINK_KINDS.get(code.value, "unknown"))
                starts.append(node_ids[a.value])
                ends.append(node_ids[b.value])
            self._layout = Layout(
                node_ids,
                tuple(kinds),
                tuple(elevations),
                link_ids,
                tuple(link_kinds),
                tuple(starts),
                tuple(ends),
                self.units,
            )
        return self._layout

    # -- reading values -----------------------------------------------------------------------

    def _get(self, call, index: int, ctype=c_double):
        value = ctype()
        check(call(self._ptr, index, byref(value)))
        return value.value

    def elevation(self, node: Element) -> float:
        """Elevation of a node (length unit)."""
        return self._get(lib.ringmain_model_get_elevation, self.node_index(node))

    def demand(self, node: Element) -> float:
        """Demand of a junction (flow unit)."""
        return self._get(lib.ringmain_model_get_demand, self.node_index(node))

    def reservoir_head(self, node: Element) -> float:
        """Fixed head of a reservoir (length unit)."""
        return self._get(lib.ringmain_model_get_reservoir_head, self.node_index(node))

    def tank_level(self, node: Element) -> float:
        """Water level of a tank above its floor (length unit)."""
        return self._get(lib.ringmain_model_get_tank_level, self.node_index(node))

    def link_status(self, link: Element) -> str:
        """The status set on a link: "open", "closed" or (valves) "automatic"."""
        code = self._get(lib.ringmain_model_get_link_status, self.link_index(link), c_uint32)
        return {v: k for k, v in LINK_STATUSES.items()}[code]

    def pump_speed(self, link: Element) -> float:
        """Relative speed of a pump."""
        return self._get(lib.ringmain_model_get_pump_speed, self.link_index(link))

    def valve_setting(self, link: Element) -> float:
        """Setting of a valve: a pressure, a flow or a loss coefficient, by valve type."""
        return self._get(lib.ringmain_model_get_valve_setting, self.link_index(link))

    def valve_type(self, link: Element) -> str:
        """"pressure-reducing", "pressure-sustaining", "flow-control" or "throttle"."""
        code = self._get(lib.ringmain_model_get_valve_type, self.link_index(link), c_uint32)
        return {v: k for k, v in VALVE_TYPES.items()}[code]

    def pipe_roughness(self, link: Element) -> float:
        """Roughness of a pipe (Hazen–Williams C, or absolute roughness under Darcy–Weisbach)."""
        return self._get(lib.ringmain_model_get_pipe_roughness, self.link_index(link))

    def pipe_diameter(self, link: Element) -> float:
        """Internal diameter of a pipe (diameter unit)."""
        return self._get(lib.ringmain_model_get_pipe_diameter, self.link_index(link))

    # -- building -----------------------------------------------------------------------------

    def _added(self, call, *args) -> int:
        index = c_size_t()
        check(call(self._ptr, *args, byref(index)))
        self._layout = None
        return index.value

    def add_junction(self, id: str, elevation: float, demand: float = 0.0) -> int:
        """Adds a junction; returns its index."""
        return self._added(lib.ringmain_model_add_junction, id.encode("utf-8"), elevation, demand)

    def add_reservoir(self, id: str, head: float) -> int:
        """Adds a reservoir with a fixed head; returns its index."""
        return self._added(lib.ringmain_model_add_reservoir, id.encode("utf-8"), head)

    def add_tank(
        self,
        id: str,
        elevation: float,
        level: float,
        min_level: float = 0.0,
        max_level: float | None = None,
        diameter: float | None = None,
    ) -> int:
        """Adds a tank (floor at ``elevation``, water ``level`` above it); returns its index."""
        return self._added(
            lib.ringmain_model_add_tank,
            id.encode("utf-8"),
            elevation,
            level,
            min_level,
            math.nan if max_level is None else max_level,
            math.nan if diameter is None else diameter,
        )

    def add_pipe(
        self,
        id: str,
        start: str,
        end: str,
        length: float,
        diameter: float,
        roughness: float,
        minor_loss: float = 0.0,
        check_valve: bool = False,
    ) -> int:
        """Adds a pipe from node ``start`` to node ``end``; returns its index."""
        return self._added(
            lib.ringmain_model_add_pipe,
            id.encode("utf-8"),
            start.encode("utf-8"),
            end.encode("utf-8"),
            length,
            diameter,
            roughness,
            minor_loss,
            c_bool(check_valve),
        )

    def add_pump(
        self,
        id: str,
        start: str,
        end: str,
        *,
        head_curve: Iterable[tuple[float, float]] | None = None,
        power: float | None = None,
        speed: float = 1.0,
    ) -> int:
        """Adds a pump from ``start`` (suction) to ``end`` (discharge) with either a head curve of
        (flow, head) points or a constant power (kW, or hp in US units); returns its index."""
        if (head_curve is None) == (power is None):
            raise ValueError("give either head_curve or power")
        if power is not None:
            return self._added(
                lib.ringmain_model_add_pump_power, id.encode("utf-8"), start.encode("utf-8"), end.encode("utf-8"),
                power, speed,
            )
        points = list(head_curve or [])
        return self._added(
            lib.ringmain_model_add_pump_curve,
            id.encode("utf-8"),
            start.encode("utf-8"),
            end.encode("utf-8"),
            _doubles([q for q, _ in points]),
            _doubles([h for _, h in points]),
            len(points),
            speed,
        )

    def add_valve(
        self, id: str, start: str, end: str, valve: str, diameter: float, setting: float, minor_loss: float = 0.0
    ) -> int:
        """Adds a control valve of type ``valve`` ("pressure-reducing", "pressure-sustaining",
        "flow-control" or "throttle"); returns its index. It starts regulating ("automatic")."""
        return self._added(
            lib.ringmain_model_add_valve,
            id.encode("utf-8"),
            start.encode("utf-8"),
            end.encode("utf-8"),
            _code(VALVE_TYPES, valve, "valve type"),
            diameter,
            setting,
            minor_loss,
        )

    # -- changing values between solves ---------------------------------------------------------

    def set_demand(self, node: Element, demand: float) -> None:
        """Sets the demand of a junction (flow unit)."""
        check(lib.ringmain_model_set_demand(self._ptr, self.node_index(node), demand))

    def set_reservoir_head(self, node: Element, head: float) -> None:
        """Sets the fixed head of a reservoir (length unit)."""
        check(lib.ringmain_model_set_reservoir_head(self._ptr, self.node_index(node), head))

    def set_tank_level(self, node: Element, level: float) -> None:
        """Sets the water level of a tank above its floor (length unit)."""
        check(lib.ringmain_model_set_tank_level(self._ptr, self.node_index(node), level))

    def set_link_status(self, link: Element, status: str) -> None:
        """Sets a link "open" or "closed", or a valve "automatic" (regulating)."""
        code = _code(LINK_STATUSES, status, "link status")
        check(lib.ringmain_model_set_link_status(self._ptr, self.link_index(link), code))

    def set_pump_speed(self, link: Element, speed: float) -> None:
        """Sets the relative speed of a pump (0 stops it)."""
        check(lib.ringmain_model_set_pump_speed(self._ptr, self.link_index(link), speed))

    def set_pump_efficiency(self, link: Element, efficiency: float | Iterable[tuple[float, float]]) -> None:
        """Sets a pump's efficiency: a constant in percent, or (flow, percent) points."""
        k = self.link_index(link)
        if isinstance(efficiency, (int, float)):
            check(lib.ringmain_model_set_pump_efficiency(self._ptr, k, float(efficiency)))
        else:
            points = list(efficiency)
            flows, percents = _doubles([q for q, _ in points]), _doubles([e for _, e in points])
            check(lib.ringmain_model_set_pump_efficiency_curve(self._ptr, k, flows, percents, len(points)))

    def set_valve_setting(self, link: Element, setting: float) -> None:
        """Sets a valve's setting (a pressure, a flow or a loss coefficient, by valve type)."""
        check(lib.ringmain_model_set_valve_setting(self._ptr, self.link_index(link), setting))

    def set_pipe_roughness(self, link: Element, roughness: float) -> None:
        """Sets a pipe's roughness."""
        check(lib.ringmain_model_set_pipe_roughness(self._ptr, self.link_index(link), roughness))

    def set_pipe_diameter(self, link: Element, diameter: float) -> None:
        """Sets a pipe's internal diameter (diameter unit)."""
        check(lib.ringmain_model_set_pipe_diameter(self._ptr, self.link_index(link), diameter))

    def set_water_temperature(self, celsius: float) -> None:
        """Sets the water temperature (°C), which sets its density and viscosity."""
        check(lib.ringmain_model_set_water_temperature(self._ptr, celsius))

    def set_solver_options(
        self, max_iterations: int = 200, head_tolerance: float = 1e-4, flow_tolerance: float = 1e-6
    ) -> None:
        """Sets the iteration limit, head tolerance (length unit) and relative flow tolerance."""
        if not 0 <= max_iterations <= 0xFFFFFFFF:
            raise ValueError(f"max_iterations must be between 1 and 100000, found {max_iterations}")
        check(lib.ringmain_model_set_solver_options(self._ptr, max_iterations, head_tolerance, flow_tolerance))

    @property
    def warm_start(self) -> bool:
        """Whether each solve starts from the previous solution (set it True for scenario loops)."""
        return getattr(self, "_warm_start", False)

    @warm_start.setter
    def warm_start(self, enabled: bool) -> None:
        check(lib.ringmain_model_set_warm_start(self._ptr, bool(enabled)))
        self._warm_start = bool(enabled)

    # -- checking, saving, solving --------------------------------------------------------------

    def validate(self) -> None:
        """Checks the whole model as a solve would; raises ``ModelError``."""
        check(lib.ringmain_model_validate(self._ptr))

    def save(self, path: str | os.PathLike[str]) -> None:
        """Writes the model to a .toml or .json file in its own units."""
        check(lib.ringmain_model_save(self._ptr, os.fsencode(path)))

    def to_toml(self) -> str:
        """The model as TOML model-file text."""
        return _text(lib.ringmain_model_write, self._ptr, C["ringmain_format"]["RINGMAIN_FORMAT_TOML"])

    def to_json(self) -> str:
        """The model as JSON model-file text."""
        return _text(lib.ringmain_model_write, self._ptr, C["ringmain_format"]["RINGMAIN_FORMAT_JSON"])

    def solve(self) -> Results:
        """Solves a snapshot; returns its ``Results``. Raises ``SolveError`` when the solver does
        not converge (the message gives the iterations and the elements still moving most) and
        ``ModelError`` when the model fails its checks."""
        layout = self.layout()
        out = c_void_p()
        check(lib.ringmain_model_solve(self._ptr, byref(out)))
        return Results(out.value, layout)

    def __repr__(self) -> str:
        if self.closed:
            return "<ringmain.Model (closed)>"
        return f"<ringmain.Model {self.title!r}: {self.node_count} nodes, {self.link_count} links>"


def live_handles() -> tuple[int, int]:
    """Numbers of model and results handles alive in the process (for leak checks)."""
    models, results = c_size_t(), c_size_t()
    check(lib.ringmain_live_handles(byref(models), byref(results)))
    return models.value, results.value


def version() -> str:
    """Version of the loaded native library."""
    return lib.ringmain_version().decode("ascii")

