"""The network model."""

from __future__ import annotations

import ctypes
import os
import sys
from collections.abc import Callable, Iterable, Mapping, Sequence
from ctypes import byref, c_double, c_size_t, c_uint32, c_void_p
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Literal, Union

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _args, _ffi
from ._handle import Handle
from ._results import Results, geo_features
from .errors import ArgumentTypeError, InvalidValueError, check

if TYPE_CHECKING:
    from ._simulation import Simulation

if sys.version_info >= (3, 11):
    from typing import Self
else:  # pragma: no cover
    from typing_extensions import Self

lib = _ffi.lib
C = _ffi.CONSTANTS

#: A node or link given by its id (``str``) or its index (``int`` or a numpy integer).
Element = Union[str, int, np.integer[Any]]

LengthUnit = Literal["m", "ft"]
DiameterUnit = Literal["mm", "m", "in", "ft"]
FlowUnit = Literal["L/s", "m3/s", "m3/h", "ML/d", "gpm", "cfs", "Mgal/d"]
PressureUnit = Literal["m", "kPa", "bar", "psi", "ft"]
RoughnessUnit = Literal["mm", "m", "in", "ft"]
HeadlossLaw = Literal["hazen-williams", "darcy-weisbach"]
ValveType = Literal["pressure-reducing", "pressure-sustaining", "flow-control", "throttle"]
LinkStatus = Literal["open", "closed", "automatic"]
NodeKind = Literal["junction", "reservoir", "tank"]
LinkKind = Literal["pipe", "pump", "valve"]

LENGTH_UNITS = {"m": 0, "ft": 1}
DIAMETER_UNITS = {"mm": 0, "m": 1, "in": 2, "ft": 3}
FLOW_UNITS = {"L/s": 0, "m3/s": 1, "m3/h": 2, "ML/d": 3, "gpm": 4, "cfs": 5, "Mgal/d": 6}
PRESSURE_UNITS = {"m": 0, "kPa": 1, "bar": 2, "psi": 3, "ft": 4}
ROUGHNESS_UNITS = {"mm": 0, "m": 1, "in": 2, "ft": 3}
HEADLOSS_LAWS = {"hazen-williams": 0, "darcy-weisbach": 1}
VALVE_TYPES = {"pressure-reducing": 0, "pressure-sustaining": 1, "flow-control": 2, "throttle": 3}
LINK_STATUSES = {"open": 0, "closed": 1, "automatic": 2}
NODE_KINDS: dict[int, NodeKind] = {0: "junction", 1: "reservoir", 2: "tank"}
LINK_KINDS: dict[int, LinkKind] = {0: "pipe", 1: "pump", 2: "valve"}
QUANTITIES = {"length": 0, "diameter": 1, "flow": 2, "pressure": 3, "roughness": 4, "velocity": 5, "power": 6}

FloatArray = NDArray[np.float64]


def _one_text(call: Callable[..., int], *args: object) -> str:
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


def _texts(call: Callable[..., int], *args: object) -> list[str]:
    """Calls a function that writes NUL-terminated texts back to back; returns them all."""
    needed = c_size_t(0)
    code = call(*args, None, 0, byref(needed))
    if code == _ffi.OK:
        return []
    if code != _ffi.BUFFER_TOO_SMALL:
        check(code)
    buf = ctypes.create_string_buffer(needed.value)
    check(call(*args, buf, needed.value, byref(needed)))
    raw = buf.raw[: needed.value]
    return [t.decode("utf-8") for t in raw.split(b"\0")[:-1]]


def _doubles(values: Sequence[float]) -> ctypes.Array[c_double]:
    return (c_double * len(values))(*values)


def _double_p(a: FloatArray) -> Any:
    return a.ctypes.data_as(_ffi.double_p)


def _read_doubles(call: Callable[..., int], handle: int, n: int) -> FloatArray:
    """An array of ``n`` doubles written by ``call(handle, buf, len, count)``."""
    out = np.empty(n, dtype=np.float64)
    count = c_size_t()
    check(call(handle, _double_p(out), n, byref(count)))
    return out


def _read_u32(call: Callable[..., int], handle: int, n: int) -> NDArray[np.uint32]:
    out = np.empty(n, dtype=np.uint32)
    count = c_size_t()
    check(call(handle, out.ctypes.data_as(_ffi.u32_p), n, byref(count)))
    return out


@dataclass(frozen=True)
class Layout:
    """The ids, kinds, ends and places of one network structure, shared by the results solved on
    it. Read from the library in a few whole-array calls."""

    node_ids: tuple[str, ...]
    node_kinds: tuple[NodeKind, ...]
    elevations: tuple[float, ...]
    link_ids: tuple[str, ...]
    link_kinds: tuple[LinkKind, ...]
    link_from: tuple[str, ...]
    link_to: tuple[str, ...]
    units: dict[str, str]
    link_start: NDArray[np.intp] = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    link_end: NDArray[np.intp] = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    x: FloatArray = field(default_factory=lambda: np.zeros(0))
    y: FloatArray = field(default_factory=lambda: np.zeros(0))
    zones: tuple[str, ...] = ()
    node_index: dict[str, int] = field(init=False, repr=False, compare=False)
    link_index: dict[str, int] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "node_index", {n: i for i, n in enumerate(self.node_ids)})
        object.__setattr__(self, "link_index", {k: i for i, k in enumerate(self.link_ids)})


def _status_code(value: object, argument: str) -> int:
    if isinstance(value, str):
        return _args.choice(value, LINK_STATUSES, argument, "link status")
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ArgumentTypeError(f"argument '{argument}' must be 'open', 'closed' or 'automatic', got {type(value).__name__}")
    if int(value) not in LINK_STATUSES.values():
        raise InvalidValueError(0, f"argument '{argument}': {int(value)} is not a link status code (0, 1 or 2)")
    return int(value)


class Model(Handle):
    """A water-distribution network model, with the solver that keeps its analysis between solves.

    Values go in and come out in the model's own units: those of the ``[units]`` table of the file
    or text it was read from, or those given to :meth:`Model.new` (:attr:`units` lists them).
    Nodes and links are named by id (``str``) or by index (``int`` or a numpy integer, in the
    order they were read or added); ``bool`` is refused as an index.

    Close it with :meth:`close` or a ``with`` block; it is also freed when collected. A model is
    not safe to change from two threads at once; distinct models may be used from distinct
    threads. ``copy.copy`` and ``copy.deepcopy`` make an independent model (a clone of the native
    model); pickling writes the model's JSON text and reads it back.

    Examples
    --------
    >>> import ringmain
    >>> m = ringmain.Model.new()
    >>> m.add_reservoir("Spring", head=60.0)
    0
    >>> m.add_junction("J-1", elevation=20.0, demand=4.0)
    1
    >>> m.add_pipe("P-1", "Spring", "J-1", length=500.0, diameter=150.0, roughness=120.0)
    0
    >>> with m.solve() as r:
    ...     round(r.node_pressure("J-1"), 2)
    39.72

    The same pressure by hand: 40 m of static head less the Hazen–Williams loss in SI units,
    h = 10.67 L Q^1.852 / (C^1.852 D^4.87) (the usual form of the formula, common practice):

    >>> round(40.0 - 10.67 * 500 * 0.004**1.852 / (120**1.852 * 0.15**4.87), 2)
    39.72
    """

    _free = staticmethod(lib.ringmain_model_free)
    _what = "model"

    def __init__(self, pointer: int) -> None:
        super().__init__(pointer)
        self._layout: Layout | None = None
        self._warm_start = False

    # -- making models ------------------------------------------------------------------------

    @classmethod
    def _made(cls, call: Callable[..., int], *args: object) -> Self:
        out = c_void_p()
        check(call(*args, byref(out)))
        assert out.value is not None
        return cls(out.value)

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> Self:
        """Reads a model file (.toml or .json).

        Parameters
        ----------
        path : str or os.PathLike
            The model file.

        Raises
        ------
        ModelError
            Naming the file, element and key of the first problem.
        """
        if not isinstance(path, (str, os.PathLike)):
            raise ArgumentTypeError(f"argument 'path' must be a str or os.PathLike, got {type(path).__name__}")
        encoded = os.fsencode(path)
        if b"\0" in encoded:
            raise InvalidValueError(0, "argument 'path' contains a NUL character")
        return cls._made(lib.ringmain_model_load, encoded)

    @classmethod
    def from_toml(cls, text: str) -> Self:
        """Reads a model from TOML model-file text."""
        if not isinstance(text, str):
            raise ArgumentTypeError(f"argument 'text' must be a str, got {type(text).__name__}")
        data = text.encode("utf-8")
        return cls._made(lib.ringmain_model_from_toml, data, len(data))

    @classmethod
    def from_json(cls, text: str) -> Self:
        """Reads a model from JSON model-file text."""
        if not isinstance(text, str):
            raise ArgumentTypeError(f"argument 'text' must be a str, got {type(text).__name__}")
        data = text.encode("utf-8")
        return cls._made(lib.ringmain_model_from_json, data, len(data))

    @classmethod
    def new(
        cls,
        *,
        length: LengthUnit = "m",
        diameter: DiameterUnit = "mm",
        flow: FlowUnit = "L/s",
        pressure: PressureUnit = "m",
        roughness: RoughnessUnit = "mm",
        headloss: HeadlossLaw = "hazen-williams",
    ) -> Self:
        """An empty model to build with ``add_*``, in the given units (names as in model files)."""
        return cls._made(
            lib.ringmain_model_new,
            _args.choice(length, LENGTH_UNITS, "length", "length unit"),
            _args.choice(diameter, DIAMETER_UNITS, "diameter", "diameter unit"),
            _args.choice(flow, FLOW_UNITS, "flow", "flow unit"),
            _args.choice(pressure, PRESSURE_UNITS, "pressure", "pressure unit"),
            _args.choice(roughness, ROUGHNESS_UNITS, "roughness", "roughness unit"),
            _args.choice(headloss, HEADLOSS_LAWS, "headloss", "head-loss law"),
        )

    def copy(self) -> Self:
        """An independent copy (for example, one per thread), warm start setting included."""
        copy = self._made(lib.ringmain_model_clone, self._ptr)
        copy._warm_start = self._warm_start
        return copy

    def __copy__(self) -> Self:
        return self.copy()

    def __deepcopy__(self, memo: dict[int, Any]) -> Self:
        return self.copy()

    def __reduce__(self) -> tuple[Callable[[str, bool], Model], tuple[str, bool]]:
        # Through the model text: the native handle never leaves this process.
        return (_from_pickle, (self.to_json(), self._warm_start))

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
        return _one_text(lib.ringmain_model_title, self._ptr)

    @property
    def units(self) -> dict[str, str]:
        """The unit label of each quantity: length, diameter, flow, pressure, roughness (empty under
        Hazen–Williams), velocity and power."""
        return {q: _one_text(lib.ringmain_model_unit_label, self._ptr, code) for q, code in QUANTITIES.items()}

    @property
    def headloss(self) -> HeadlossLaw:
        """The friction law: "hazen-williams" or "darcy-weisbach"."""
        code = c_uint32()
        check(lib.ringmain_model_get_headloss(self._ptr, byref(code)))
        return "hazen-williams" if code.value == 0 else "darcy-weisbach"

    def node_index(self, node: Element) -> int:
        """The index of a node given by id (or an index, checked).

        Raises
        ------
        NotFoundError
            (a ``KeyError``) for an unknown id.
        ElementIndexError
            (an ``IndexError``) for an index out of range.
        ArgumentTypeError
            (a ``TypeError``) for anything but a ``str`` or an integer (``bool`` included).
        """
        if isinstance(node, str):
            i = c_size_t()
            check(lib.ringmain_model_node_index(self._ptr, _args.text_id(node, "node"), byref(i)))
            return i.value
        return _args.index(node, "node", self.node_count, "node")

    def link_index(self, link: Element) -> int:
        """The index of a link given by id (or an index, checked); errors as :meth:`node_index`."""
        if isinstance(link, str):
            k = c_size_t()
            check(lib.ringmain_model_link_index(self._ptr, _args.text_id(link, "link"), byref(k)))
            return k.value
        return _args.index(link, "link", self.link_count, "link")

    def node_ids(self, kind: NodeKind | None = None) -> list[str]:
        """Ids of every node, or only of one kind ("junction", "reservoir" or "tank")."""
        layout = self.layout()
        return [n for n, k in zip(layout.node_ids, layout.node_kinds) if kind is None or k == kind]

    def link_ids(self, kind: LinkKind | None = None) -> list[str]:
        """Ids of every link, or only of one kind ("pipe", "pump" or "valve")."""
        layout = self.layout()
        return [n for n, k in zip(layout.link_ids, layout.link_kinds) if kind is None or k == kind]

    def node_kind(self, node: Element) -> NodeKind:
        """"junction", "reservoir" or "tank"."""
        return self.layout().node_kinds[self.node_index(node)]

    def link_kind(self, link: Element) -> LinkKind:
        """"pipe", "pump" or "valve"."""
        return self.layout().link_kinds[self.link_index(link)]

    def link_nodes(self, link: Element) -> tuple[str, str]:
        """The ids of the link's start and end nodes (flow is positive from start to end)."""
        layout = self.layout()
        k = self.link_index(link)
        return layout.link_from[k], layout.link_to[k]

    def layout(self) -> Layout:
        """Ids, kinds, elevations, ends, coordinates and zones of the current structure (read in a
        few whole-array calls, and again after ``add_*``)."""
        if self._layout is None:
            ptr = self._ptr
            n, m = self.node_count, self.link_count
            node_ids = tuple(_texts(lib.ringmain_model_node_ids, ptr))
            link_ids = tuple(_texts(lib.ringmain_model_link_ids, ptr))
            zones = tuple(_texts(lib.ringmain_model_node_zones, ptr))
            node_kinds = tuple(NODE_KINDS[int(c)] for c in _read_u32(lib.ringmain_model_node_kinds, ptr, n))
            link_kinds = tuple(LINK_KINDS[int(c)] for c in _read_u32(lib.ringmain_model_link_kinds, ptr, m))
            elevations = _read_doubles(lib.ringmain_model_elevations, ptr, n)
            start = np.empty(m, dtype=np.uintp)
            end = np.empty(m, dtype=np.uintp)
            count = c_size_t()
            check(
                lib.ringmain_model_link_ends(
                    ptr, start.ctypes.data_as(_ffi.size_p), end.ctypes.data_as(_ffi.size_p), m, byref(count)
                )
            )
            x, y = np.empty(n), np.empty(n)
            check(lib.ringmain_model_coordinates(ptr, _double_p(x), _double_p(y), n, byref(count)))
            self._layout = Layout(
                node_ids=node_ids,
                node_kinds=node_kinds,
                elevations=tuple(elevations.tolist()),
                link_ids=link_ids,
                link_kinds=link_kinds,
                link_from=tuple(node_ids[i] for i in start.tolist()),
                link_to=tuple(node_ids[i] for i in end.tolist()),
                units=self.units,
                link_start=start.astype(np.intp),
                link_end=end.astype(np.intp),
                x=x,
                y=y,
                zones=zones,
            )
        return self._layout

    @property
    def __geo_interface__(self) -> dict[str, Any]:
        """The network as a GeoJSON-like FeatureCollection: nodes as points, links as lines between
        their end nodes (``geometry`` is None where a node has no coordinates), with ids, kinds and
        zones as properties. GIS libraries (shapely, geopandas...) read it directly."""
        return {"type": "FeatureCollection", "features": geo_features(self.layout(), None)}

    # -- reading values -----------------------------------------------------------------------

    def _get(self, call: Callable[..., int], index: int) -> float:
        value = c_double()
        check(call(self._ptr, index, byref(value)))
        return value.value

    def _get_code(self, call: Callable[..., int], index: int) -> int:
        value = c_uint32()
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

    def link_status(self, link: Element) -> LinkStatus:
        """The status set on a link: "open", "closed" or (valves) "automatic"."""
        code = self._get_code(lib.ringmain_model_get_link_status, self.link_index(link))
        names: tuple[LinkStatus, ...] = ("open", "closed", "automatic")
        return names[code]

    def pump_speed(self, link: Element) -> float:
        """Relative speed of a pump."""
        return self._get(lib.ringmain_model_get_pump_speed, self.link_index(link))

    def valve_setting(self, link: Element) -> float:
        """Setting of a valve: a pressure, a flow or a loss coefficient, by valve type."""
        return self._get(lib.ringmain_model_get_valve_setting, self.link_index(link))

    def valve_type(self, link: Element) -> ValveType:
        """"pressure-reducing", "pressure-sustaining", "flow-control" or "throttle"."""
        code = self._get_code(lib.ringmain_model_get_valve_type, self.link_index(link))
        names: tuple[ValveType, ...] = ("pressure-reducing", "pressure-sustaining", "flow-control", "throttle")
        return names[code]

    def pipe_roughness(self, link: Element) -> float:
        """Roughness of a pipe (Hazen–Williams C, or absolute roughness under Darcy–Weisbach)."""
        return self._get(lib.ringmain_model_get_pipe_roughness, self.link_index(link))

    def pipe_diameter(self, link: Element) -> float:
        """Internal diameter of a pipe (diameter unit)."""
        return self._get(lib.ringmain_model_get_pipe_diameter, self.link_index(link))

    # -- whole arrays -------------------------------------------------------------------------

    def demands(self) -> FloatArray:
        """The demand of every node, in node order (flow unit; NaN for reservoirs and tanks)."""
        return _read_doubles(lib.ringmain_model_get_demands, self._ptr, self.node_count)

    def reservoir_heads(self) -> FloatArray:
        """The fixed head of every node (length unit; NaN for junctions and tanks)."""
        return _read_doubles(lib.ringmain_model_get_reservoir_heads, self._ptr, self.node_count)

    def pump_speeds(self) -> FloatArray:
        """The relative speed of every link, in link order (NaN for pipes and valves)."""
        return _read_doubles(lib.ringmain_model_get_pump_speeds, self._ptr, self.link_count)

    def valve_settings(self) -> FloatArray:
        """The setting of every link (NaN for pipes and pumps)."""
        return _read_doubles(lib.ringmain_model_get_valve_settings, self._ptr, self.link_count)

    def pipe_roughnesses(self) -> FloatArray:
        """The roughness of every link (NaN for pumps and valves)."""
        return _read_doubles(lib.ringmain_model_get_pipe_roughnesses, self._ptr, self.link_count)

    def pipe_diameters(self) -> FloatArray:
        """The internal diameter of every link (diameter unit; NaN for pumps and valves)."""
        return _read_doubles(lib.ringmain_model_get_pipe_diameters, self._ptr, self.link_count)

    def link_statuses(self) -> list[LinkStatus]:
        """The status set on every link: "open", "closed" or "automatic"."""
        codes = _read_u32(lib.ringmain_model_get_link_statuses, self._ptr, self.link_count)
        names: tuple[LinkStatus, ...] = ("open", "closed", "automatic")
        return [names[int(c)] for c in codes]

    def _values(
        self,
        values: ArrayLike | Mapping[Element, float],
        argument: str,
        count: int,
        current: Callable[[], FloatArray],
        index: Callable[[Element], int],
    ) -> FloatArray:
        """One float64 value per element from an array, or from a mapping of some elements."""
        if isinstance(values, Mapping):
            array = current()
            for key, value in values.items():
                array[index(key)] = _args.real(value, f"{argument}[{key!r}]")
            return array
        if isinstance(values, (str, bytes)):
            raise ArgumentTypeError(f"argument '{argument}' must be an array of numbers or a mapping, got {type(values).__name__}")
        try:
            # Contiguous and aligned: arrays that come out of a pickle or a byte buffer (a Dask
            # worker's, np.frombuffer at an odd offset) may be neither, and the library refuses
            # a misaligned pointer.
            array = np.require(values, dtype=np.float64, requirements=["C_CONTIGUOUS", "ALIGNED"])
        except (TypeError, ValueError) as e:
            raise ArgumentTypeError(f"argument '{argument}' must be an array of numbers or a mapping: {e}") from None
        if array.ndim != 1 or array.shape[0] != count:
            raise InvalidValueError(
                0, f"argument '{argument}' must have one value per element ({count}), got shape {array.shape}"
            )
        return array

    def _set_array(self, call: Callable[..., int], array: FloatArray) -> None:
        check(call(self._ptr, _double_p(array), array.shape[0]))

    def set_demands(self, demands: ArrayLike | Mapping[Element, float]) -> None:
        """Sets the demand of every junction in one call (flow unit).

        Parameters
        ----------
        demands : array_like or mapping
            One value per node, in node order, NaN for reservoirs and tanks (as :meth:`demands`
            gives them) and for junctions to leave unchanged; or a mapping from node ids or
            indices to demands.

        Raises
        ------
        WrongKindError
            A number given for a reservoir or tank; nothing is changed.
        InvalidValueError
            A value that is not finite, or an array of the wrong length; nothing is changed.

        Examples
        --------
        >>> import numpy as np, ringmain
        >>> m = ringmain.Model.new()
        >>> _ = m.add_reservoir("Spring", head=60.0)
        >>> _ = m.add_junction("J-1", elevation=20.0, demand=4.0)
        >>> m.set_demands(np.array([np.nan, 6.5]))
        >>> m.demands().tolist()
        [nan, 6.5]
        >>> m.set_demands({"J-1": 2.0})
        >>> m.demand("J-1")
        2.0
        """
        n = self.node_count
        self._set_array(
            lib.ringmain_model_set_demands,
            self._values(demands, "demands", n, self.demands, self.node_index),
        )

    def set_reservoir_heads(self, heads: ArrayLike | Mapping[Element, float]) -> None:
        """Sets the fixed head of every reservoir in one call (length unit); as :meth:`set_demands`."""
        n = self.node_count
        self._set_array(
            lib.ringmain_model_set_reservoir_heads,
            self._values(heads, "heads", n, self.reservoir_heads, self.node_index),
        )

    def set_pump_speeds(self, speeds: ArrayLike | Mapping[Element, float]) -> None:
        """Sets the relative speed of every pump in one call: one value per link (NaN for pipes and
        valves, and for pumps to leave unchanged), or a mapping of pump ids to speeds."""
        m = self.link_count
        self._set_array(
            lib.ringmain_model_set_pump_speeds, self._values(speeds, "speeds", m, self.pump_speeds, self.link_index)
        )

    def set_valve_settings(self, settings: ArrayLike | Mapping[Element, float]) -> None:
        """Sets the setting of every valve in one call; as :meth:`set_pump_speeds`."""
        m = self.link_count
        self._set_array(
            lib.ringmain_model_set_valve_settings,
            self._values(settings, "settings", m, self.valve_settings, self.link_index),
        )

    def set_pipe_roughnesses(self, roughnesses: ArrayLike | Mapping[Element, float]) -> None:
        """Sets the roughness of every pipe in one call; as :meth:`set_pump_speeds`."""
        m = self.link_count
        self._set_array(
            lib.ringmain_model_set_pipe_roughnesses,
            self._values(roughnesses, "roughnesses", m, self.pipe_roughnesses, self.link_index),
        )

    def set_pipe_diameters(self, diameters: ArrayLike | Mapping[Element, float]) -> None:
        """Sets the internal diameter of every pipe in one call (diameter unit); as
        :meth:`set_pump_speeds`."""
        m = self.link_count
        self._set_array(
            lib.ringmain_model_set_pipe_diameters,
            self._values(diameters, "diameters", m, self.pipe_diameters, self.link_index),
        )

    def set_link_statuses(self, statuses: Sequence[LinkStatus | int] | Mapping[Element, LinkStatus]) -> None:
        """Sets the status of every link in one call: a sequence with one status per link ("open",
        "closed", "automatic" for valves, or their codes 0, 1, 2), or a mapping of some links'
        ids or indices to statuses. All or nothing."""
        m = self.link_count
        codes = np.empty(m, dtype=np.uint32)
        if isinstance(statuses, Mapping):
            codes[:] = [LINK_STATUSES[s] for s in self.link_statuses()]
            for key, value in statuses.items():
                codes[self.link_index(key)] = _status_code(value, f"statuses[{key!r}]")
        else:
            if isinstance(statuses, (str, bytes)):
                raise ArgumentTypeError(f"argument 'statuses' must be a sequence or a mapping, got {type(statuses).__name__}")
            items = list(statuses)
            if len(items) != m:
                raise InvalidValueError(0, f"argument 'statuses' must have one status per link ({m}), got {len(items)}")
            codes[:] = [_status_code(v, f"statuses[{k}]") for k, v in enumerate(items)]
        check(lib.ringmain_model_set_link_statuses(self._ptr, codes.ctypes.data_as(_ffi.u32_p), m))

    # -- building -----------------------------------------------------------------------------

    def _added(self, call: Callable[..., int], *args: object) -> int:
        index = c_size_t()
        check(call(self._ptr, *args, byref(index)))
        self._layout = None
        return index.value

    def add_junction(self, id: str, elevation: float, demand: float = 0.0) -> int:
        """Adds a junction; returns its index."""
        return self._added(
            lib.ringmain_model_add_junction,
            _args.text_id(id, "id"),
            _args.real(elevation, "elevation"),
            _args.real(demand, "demand"),
        )

    def add_reservoir(self, id: str, head: float) -> int:
        """Adds a reservoir with a fixed head; returns its index."""
        return self._added(lib.ringmain_model_add_reservoir, _args.text_id(id, "id"), _args.real(head, "head"))

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
            _args.text_id(id, "id"),
            _args.real(elevation, "elevation"),
            _args.real(level, "level"),
            _args.real(min_level, "min_level"),
            _args.optional_real(max_level, "max_level"),
            _args.optional_real(diameter, "diameter"),
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
            _args.text_id(id, "id"),
            _args.text_id(start, "start"),
            _args.text_id(end, "end"),
            _args.real(length, "length"),
            _args.real(diameter, "diameter"),
            _args.real(roughness, "roughness"),
            _args.real(minor_loss, "minor_loss"),
            _args.flag(check_valve, "check_valve"),
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
            raise InvalidValueError(0, "give either head_curve or power")
        ids = (_args.text_id(id, "id"), _args.text_id(start, "start"), _args.text_id(end, "end"))
        if power is not None:
            return self._added(
                lib.ringmain_model_add_pump_power, *ids, _args.real(power, "power"), _args.real(speed, "speed")
            )
        points = [
            (_args.real(q, f"head_curve[{i}][0]"), _args.real(h, f"head_curve[{i}][1]"))
            for i, (q, h) in enumerate(head_curve or [])
        ]
        return self._added(
            lib.ringmain_model_add_pump_curve,
            *ids,
            _doubles([q for q, _ in points]),
            _doubles([h for _, h in points]),
            len(points),
            _args.real(speed, "speed"),
        )

    def add_valve(
        self,
        id: str,
        start: str,
        end: str,
        valve: ValveType,
        diameter: float,
        setting: float,
        minor_loss: float = 0.0,
    ) -> int:
        """Adds a control valve of type ``valve`` ("pressure-reducing", "pressure-sustaining",
        "flow-control" or "throttle"); returns its index. It starts regulating ("automatic")."""
        return self._added(
            lib.ringmain_model_add_valve,
            _args.text_id(id, "id"),
            _args.text_id(start, "start"),
            _args.text_id(end, "end"),
            _args.choice(valve, VALVE_TYPES, "valve", "valve type"),
            _args.real(diameter, "diameter"),
            _args.real(setting, "setting"),
            _args.real(minor_loss, "minor_loss"),
        )

    # -- changing values between solves ---------------------------------------------------------

    def set_demand(self, node: Element, demand: float) -> None:
        """Sets the demand of a junction (flow unit)."""
        check(lib.ringmain_model_set_demand(self._ptr, self.node_index(node), _args.real(demand, "demand")))

    def set_reservoir_head(self, node: Element, head: float) -> None:
        """Sets the fixed head of a reservoir (length unit)."""
        check(lib.ringmain_model_set_reservoir_head(self._ptr, self.node_index(node), _args.real(head, "head")))

    def set_tank_level(self, node: Element, level: float) -> None:
        """Sets the water level of a tank above its floor (length unit)."""
        check(lib.ringmain_model_set_tank_level(self._ptr, self.node_index(node), _args.real(level, "level")))

    def set_link_status(self, link: Element, status: LinkStatus) -> None:
        """Sets a link "open" or "closed", or a valve "automatic" (regulating)."""
        code = _args.choice(status, LINK_STATUSES, "status", "link status")
        check(lib.ringmain_model_set_link_status(self._ptr, self.link_index(link), code))

    def set_pump_speed(self, link: Element, speed: float) -> None:
        """Sets the relative speed of a pump (0 stops it)."""
        check(lib.ringmain_model_set_pump_speed(self._ptr, self.link_index(link), _args.real(speed, "speed")))

    def set_pump_efficiency(self, link: Element, efficiency: float | Iterable[tuple[float, float]]) -> None:
        """Sets a pump's efficiency: a constant in percent, or (flow, percent) points."""
        k = self.link_index(link)
        if isinstance(efficiency, (int, float, np.number)) and not isinstance(efficiency, bool):
            check(lib.ringmain_model_set_pump_efficiency(self._ptr, k, _args.real(efficiency, "efficiency")))
        else:
            if not isinstance(efficiency, Iterable):
                raise ArgumentTypeError(
                    f"argument 'efficiency' must be a number or (flow, percent) points, got {type(efficiency).__name__}"
                )
            points = [
                (_args.real(q, f"efficiency[{i}][0]"), _args.real(e, f"efficiency[{i}][1]"))
                for i, (q, e) in enumerate(efficiency)
            ]
            flows, percents = _doubles([q for q, _ in points]), _doubles([e for _, e in points])
            check(lib.ringmain_model_set_pump_efficiency_curve(self._ptr, k, flows, percents, len(points)))

    def set_valve_setting(self, link: Element, setting: float) -> None:
        """Sets a valve's setting (a pressure, a flow or a loss coefficient, by valve type)."""
        check(lib.ringmain_model_set_valve_setting(self._ptr, self.link_index(link), _args.real(setting, "setting")))

    def set_pipe_roughness(self, link: Element, roughness: float) -> None:
        """Sets a pipe's roughness."""
        value = _args.real(roughness, "roughness")
        check(lib.ringmain_model_set_pipe_roughness(self._ptr, self.link_index(link), value))

    def set_pipe_diameter(self, link: Element, diameter: float) -> None:
        """Sets a pipe's internal diameter (diameter unit)."""
        value = _args.real(diameter, "diameter")
        check(lib.ringmain_model_set_pipe_diameter(self._ptr, self.link_index(link), value))

    def set_water_temperature(self, celsius: float) -> None:
        """Sets the water temperature (°C), which sets its density and viscosity."""
        check(lib.ringmain_model_set_water_temperature(self._ptr, _args.real(celsius, "celsius")))

    def set_solver_options(
        self, max_iterations: int = 200, head_tolerance: float = 1e-4, flow_tolerance: float = 1e-6
    ) -> None:
        """Sets the iteration limit, head tolerance (length unit) and relative flow tolerance."""
        if isinstance(max_iterations, bool) or not isinstance(max_iterations, (int, np.integer)):
            raise ArgumentTypeError(f"argument 'max_iterations' must be an int, got {type(max_iterations).__name__}")
        if not 0 <= int(max_iterations) <= 0xFFFFFFFF:
            raise InvalidValueError(0, f"max_iterations must be between 1 and 100000, found {max_iterations}")
        check(
            lib.ringmain_model_set_solver_options(
                self._ptr,
                int(max_iterations),
                _args.real(head_tolerance, "head_tolerance"),
                _args.real(flow_tolerance, "flow_tolerance"),
            )
        )

    @property
    def warm_start(self) -> bool:
        """Whether each solve starts from the previous solution (set it True for scenario loops)."""
        return self._warm_start

    @warm_start.setter
    def warm_start(self, enabled: bool) -> None:
        flag = _args.flag(enabled, "warm_start")
        check(lib.ringmain_model_set_warm_start(self._ptr, flag))
        self._warm_start = flag

    # -- checking, saving, solving --------------------------------------------------------------

    def validate(self) -> None:
        """Checks the whole model as a solve would; raises ``ModelError``."""
        check(lib.ringmain_model_validate(self._ptr))

    def save(self, path: str | os.PathLike[str]) -> None:
        """Writes the model to a .toml or .json file in its own units.

        The file is written under a temporary name beside it and renamed into place only once
        whole: a save that fails leaves an existing file as it was."""
        if not isinstance(path, (str, os.PathLike)):
            raise ArgumentTypeError(f"argument 'path' must be a str or os.PathLike, got {type(path).__name__}")
        encoded = os.fsencode(path)
        if b"\0" in encoded:
            raise InvalidValueError(0, "argument 'path' contains a NUL character")
        check(lib.ringmain_model_save(self._ptr, encoded))

    def to_toml(self) -> str:
        """The model as TOML model-file text."""
        return _one_text(lib.ringmain_model_write, self._ptr, C["ringmain_format"]["RINGMAIN_FORMAT_TOML"])

    def to_json(self) -> str:
        """The model as JSON model-file text."""
        return _one_text(lib.ringmain_model_write, self._ptr, C["ringmain_format"]["RINGMAIN_FORMAT_JSON"])

    def solve(self, *, threads: int | None = None) -> Results:
        """Solves a snapshot.

        Parameters
        ----------
        threads : int, optional
            Sets the library's worker threads for this and later calls (see
            :func:`ringmain.set_threads`); by default they are left as they are.

        Returns
        -------
        Results
            Independent of the model: they stay valid when it changes or is closed.

        Raises
        ------
        SolveError
            When the solver does not converge (the message gives the iterations and the elements
            still moving most).
        ModelError
            When the model fails its checks.
        """
        if threads is not None:
            from ._threads import set_threads

            set_threads(threads)
        layout = self.layout()
        out = c_void_p()
        check(lib.ringmain_model_solve(self._ptr, byref(out)))
        assert out.value is not None
        return Results(out.value, layout)

    def simulate(self, *, threads: int | None = None) -> Simulation:
        """Runs the model's extended-period simulation (its ``[simulation]`` table).

        Returns
        -------
        Simulation
            Times, the series of every quantity as (time × element) numpy arrays, the summary and
            the events; :meth:`Simulation.to_pandas` gives time-indexed DataFrames.

        Raises
        ------
        ModelError
            When the model has no ``[simulation]`` table or fails its checks.
        SolveError
            When a solve during the run fails (the message says when).
        """
        if threads is not None:
            from ._threads import set_threads

            set_threads(threads)
        from ._simulation import Simulation

        layout = self.layout()
        out = c_void_p()
        check(lib.ringmain_model_simulate(self._ptr, byref(out)))
        assert out.value is not None
        return Simulation._from_run(out.value, layout)

    def __repr__(self) -> str:
        if self.closed:
            return "<ringmain.Model (closed)>"
        return f"<ringmain.Model {self.title!r}: {self.node_count} nodes, {self.link_count} links>"


def _from_pickle(text: str, warm_start: bool) -> Model:
    model = Model.from_json(text)
    if warm_start:
        model.warm_start = True
    return model


def live_handles() -> tuple[int, int]:
    """Numbers of model and results handles alive in the process (for leak checks)."""
    models, results = c_size_t(), c_size_t()
    check(lib.ringmain_live_handles(byref(models), byref(results)))
    return models.value, results.value


def version() -> str:
    """Version of the loaded native library."""
    text: bytes = lib.ringmain_version()
    return text.decode("ascii")

