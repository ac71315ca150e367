"""The results of one solve."""

from __future__ import annotations

import math
from ctypes import byref, c_char_p, c_double, c_size_t, c_uint32
from typing import TYPE_CHECKING, Any, NamedTuple, NoReturn, Union

import numpy as np
from numpy.typing import NDArray

from . import _args, _ffi
from ._handle import Handle
from .errors import check

if TYPE_CHECKING:
    import pandas

    from ._model import Layout

lib = _ffi.lib
Element = Union[str, int, np.integer[Any]]
FloatArray = NDArray[np.float64]
_STATE_TEXT: dict[int, tuple[str, str]] = {}


def state_text(state: int) -> tuple[str, str]:
    """The status word ("open", "closed" or "active") and the reason ("" when the word says all)
    of a link state code."""
    state = int(state)
    if state not in _STATE_TEXT:
        word, reason = c_char_p(), c_char_p()
        check(lib.ringmain_link_state_text(state, byref(word), byref(reason)))
        _STATE_TEXT[state] = ((word.value or b"").decode(), (reason.value or b"").decode())
    return _STATE_TEXT[state]


def _finite_or_none(v: float) -> float | None:
    return v if math.isfinite(v) else None


def geo_features(
    layout: Layout, values: tuple[dict[str, FloatArray], dict[str, FloatArray]] | None
) -> list[dict[str, Any]]:
    """GeoJSON-like features of a network: a Point per node, a LineString per link (from its start
    node to its end node), ``geometry`` None where coordinates are missing; ``values`` adds result
    arrays (node and link quantities) to the properties."""
    features: list[dict[str, Any]] = []
    x, y = layout.x, layout.y
    has = ~(np.isnan(x) | np.isnan(y)) if x.shape[0] else np.zeros(0, dtype=bool)
    for i, node in enumerate(layout.node_ids):
        props: dict[str, Any] = {
            "id": node,
            "element": "node",
            "kind": layout.node_kinds[i],
            "elevation": layout.elevations[i],
        }
        if layout.zones and layout.zones[i]:
            props["zone"] = layout.zones[i]
        if values is not None:
            for name, array in values[0].items():
                props[name] = _finite_or_none(float(array[i]))
        geometry = {"type": "Point", "coordinates": (float(x[i]), float(y[i]))} if has[i] else None
        features.append({"type": "Feature", "id": node, "geometry": geometry, "properties": props})
    for k, link in enumerate(layout.link_ids):
        a, b = int(layout.link_start[k]), int(layout.link_end[k])
        props = {
            "id": link,
            "element": "link",
            "kind": layout.link_kinds[k],
            "from": layout.link_from[k],
            "to": layout.link_to[k],
        }
        if values is not None:
            for name, array in values[1].items():
                props[name] = _finite_or_none(float(array[k]))
        geometry = (
            {"type": "LineString", "coordinates": ((float(x[a]), float(y[a])), (float(x[b]), float(y[b])))}
            if has[a] and has[b]
            else None
        )
        features.append({"type": "Feature", "id": link, "geometry": geometry, "properties": props})
    return features


class Tables(NamedTuple):
    """The results as two pandas DataFrames, indexed by id."""

    nodes: pandas.DataFrame
    links: pandas.DataFrame


class Results(Handle):
    """One solved snapshot, in the units of its model (:attr:`units`). Independent of the model: it
    stays valid when the model changes or is closed. Whole-network arrays (:attr:`heads`,
    :attr:`flows`...) are read-only numpy arrays in node or link order, read straight from the
    library into numpy's memory.

    Results cannot be copied or pickled (``TypeError``): they own a native handle. Keep the
    arrays, or :meth:`to_pandas`, instead.
    """

    _free = staticmethod(lib.ringmain_results_free)
    _what = "results object"

    def __init__(self, pointer: int, layout: Layout) -> None:
        super().__init__(pointer)
        self._layout = layout
        self._cache: dict[str, Any] = {}

    def __copy__(self) -> NoReturn:
        raise TypeError("ringmain.Results cannot be copied (it owns a native handle); keep its arrays or to_pandas()")

    def __deepcopy__(self, memo: dict[int, Any]) -> NoReturn:
        self.__copy__()

    def __reduce__(self) -> NoReturn:
        raise TypeError(
            "ringmain.Results cannot be pickled (it owns a native handle); pickle its arrays or "
            "to_pandas(), or the model and solve again"
        )

    # -- statistics ---------------------------------------------------------------------------

    def _stat_int(self, call: Any) -> int:
        value = c_uint32()
        check(call(self._ptr, byref(value)))
        return value.value

    @property
    def iterations(self) -> int:
        """Newton iterations (linear solves) of the solve."""
        return self._stat_int(lib.ringmain_results_iterations)

    @property
    def status_changes(self) -> int:
        """Device state changes (check valves, pumps, control valves) made during the solve."""
        return self._stat_int(lib.ringmain_results_status_changes)

    @property
    def residuals(self) -> tuple[float, float]:
        """Largest mass-balance residual (flow unit) and energy residual (length unit)."""
        mass, energy = c_double(), c_double()
        check(lib.ringmain_results_residuals(self._ptr, byref(mass), byref(energy)))
        return mass.value, energy.value

    @property
    def last_changes(self) -> tuple[float, float]:
        """Largest head change (length unit) and relative flow change of the last iteration."""
        head, flow = c_double(), c_double()
        check(lib.ringmain_results_last_changes(self._ptr, byref(head), byref(flow)))
        return head.value, flow.value

    @property
    def units(self) -> dict[str, str]:
        """The unit label of each quantity (those of the model)."""
        return dict(self._layout.units)

    @property
    def warnings(self) -> list[str]:
        """Things an engineer should look at, each naming its element."""
        from ._model import _one_text

        n = c_size_t()
        check(lib.ringmain_results_warning_count(self._ptr, byref(n)))
        return [_one_text(lib.ringmain_results_warning, self._ptr, i) for i in range(n.value)]

    # -- whole-network arrays -------------------------------------------------------------------

    def _array(self, name: str, call: Any, count: int, dtype: type[Any] = np.float64) -> Any:
        if name not in self._cache:
            out = np.empty(count, dtype=dtype)
            n = c_size_t()
            pointer: Any = {np.float64: _ffi.double_p, np.uint32: _ffi.u32_p, np.bool_: _ffi.bool_p}[dtype]
            check(call(self._ptr, out.ctypes.data_as(pointer), count, byref(n)))
            out.setflags(write=False)
            self._cache[name] = out
        return self._cache[name]

    @property
    def node_ids(self) -> tuple[str, ...]:
        """Node ids, in node order."""
        return self._layout.node_ids

    @property
    def link_ids(self) -> tuple[str, ...]:
        """Link ids, in link order."""
        return self._layout.link_ids

    @property
    def heads(self) -> FloatArray:
        """Head of every node (length unit; NaN where cut off from every source)."""
        result: FloatArray = self._array("heads", lib.ringmain_results_heads, len(self.node_ids))
        return result

    @property
    def pressures(self) -> FloatArray:
        """Pressure of every node (pressure unit; NaN where cut off)."""
        result: FloatArray = self._array("pressures", lib.ringmain_results_pressures, len(self.node_ids))
        return result

    @property
    def demands(self) -> FloatArray:
        """Demand of every node (flow unit)."""
        result: FloatArray = self._array("demands", lib.ringmain_results_demands, len(self.node_ids))
        return result

    @property
    def connected(self) -> NDArray[np.bool_]:
        """Whether each node has an open path to a reservoir or tank."""
        result: NDArray[np.bool_] = self._array(
            "connected", lib.ringmain_results_connected, len(self.node_ids), np.bool_
        )
        return result

    @property
    def flows(self) -> FloatArray:
        """Flow of every link (flow unit; positive from its start node to its end node)."""
        result: FloatArray = self._array("flows", lib.ringmain_results_flows, len(self.link_ids))
        return result

    @property
    def velocities(self) -> FloatArray:
        """Mean velocity of every link (length unit per second)."""
        result: FloatArray = self._array("velocities", lib.ringmain_results_velocities, len(self.link_ids))
        return result

    @property
    def headlosses(self) -> FloatArray:
        """Head difference across every link (length unit; NaN where an end is cut off)."""
        result: FloatArray = self._array("headlosses", lib.ringmain_results_headlosses, len(self.link_ids))
        return result

    @property
    def link_states(self) -> NDArray[np.uint32]:
        """State code of every link (see :func:`state_text`)."""
        result: NDArray[np.uint32] = self._array(
            "states", lib.ringmain_results_link_states, len(self.link_ids), np.uint32
        )
        return result

    # -- one element ----------------------------------------------------------------------------

    def node_index(self, node: Element) -> int:
        """Index of a node in these results (errors as :meth:`Model.node_index`)."""
        if isinstance(node, str):
            i = c_size_t()
            check(lib.ringmain_results_node_index(self._ptr, _args.text_id(node, "node"), byref(i)))
            return i.value
        return _args.index(node, "node", len(self.node_ids), "node")

    def link_index(self, link: Element) -> int:
        """Index of a link in these results."""
        if isinstance(link, str):
            k = c_size_t()
            check(lib.ringmain_results_link_index(self._ptr, _args.text_id(link, "link"), byref(k)))
            return k.value
        return _args.index(link, "link", len(self.link_ids), "link")

    def _one(self, call: Any, index: int) -> float:
        v = c_double()
        check(call(self._ptr, index, byref(v)))
        return v.value

    def node_head(self, node: Element) -> float:
        """Head of a node (length unit)."""
        return self._one(lib.ringmain_results_node_head, self.node_index(node))

    def node_pressure(self, node: Element) -> float:
        """Pressure of a node (pressure unit)."""
        return self._one(lib.ringmain_results_node_pressure, self.node_index(node))

    def node_demand(self, node: Element) -> float:
        """Demand of a node (flow unit)."""
        return self._one(lib.ringmain_results_node_demand, self.node_index(node))

    def link_flow(self, link: Element) -> float:
        """Flow of a link (flow unit)."""
        return self._one(lib.ringmain_results_link_flow, self.link_index(link))

    def link_velocity(self, link: Element) -> float:
        """Mean velocity of a link (length unit per second)."""
        return self._one(lib.ringmain_results_link_velocity, self.link_index(link))

    def link_headloss(self, link: Element) -> float:
        """Head difference across a link (length unit)."""
        return self._one(lib.ringmain_results_link_headloss, self.link_index(link))

    def link_status(self, link: Element) -> str:
        """"open", "closed" or "active"."""
        return self.link_state(link)[0]

    def link_state(self, link: Element) -> tuple[str, str]:
        """The link's status word and the reason for it ("" when the word says all)."""
        code = c_uint32()
        check(lib.ringmain_results_link_state(self._ptr, self.link_index(link), byref(code)))
        return state_text(code.value)

    def pump_head(self, link: Element) -> float:
        """Head added by a pump (length unit; 0 when it does not run)."""
        return self._one(lib.ringmain_results_pump_head, self.link_index(link))

    def pump_power(self, link: Element) -> dict[str, float]:
        """A pump's hydraulic and shaft power (kW, or hp in US units) and efficiency (percent)."""
        hydraulic, shaft, efficiency = c_double(), c_double(), c_double()
        check(
            lib.ringmain_results_pump_power(
                self._ptr, self.link_index(link), byref(hydraulic), byref(shaft), byref(efficiency)
            )
        )
        return {"hydraulic": hydraulic.value, "shaft": shaft.value, "efficiency": efficiency.value}

    def lowest_pressure(self) -> tuple[str, float]:
        """The junction with the lowest pressure and that pressure (nodes cut off are skipped)."""
        layout = self._layout
        best: tuple[str, float] | None = None
        for node, kind, p in zip(layout.node_ids, layout.node_kinds, self.pressures):
            if kind == "junction" and math.isfinite(p) and (best is None or p < best[1]):
                best = (node, float(p))
        if best is None:
            raise ValueError("no junction has a pressure")
        return best

    # -- whole-network views --------------------------------------------------------------------

    def nodes(self) -> list[dict[str, Any]]:
        """Every node as a dict with the keys of the command-line program's JSON results: id, kind,
        elevation, head, pressure, demand, connected (None for a head or pressure that is NaN)."""
        layout = self._layout
        heads, pressures, demands, connected = self.heads, self.pressures, self.demands, self.connected
        return [
            {
                "id": layout.node_ids[i],
                "kind": layout.node_kinds[i],
                "elevation": layout.elevations[i],
                "head": _finite_or_none(float(heads[i])),
                "pressure": _finite_or_none(float(pressures[i])),
                "demand": float(demands[i]),
                "connected": bool(connected[i]),
            }
            for i in range(len(layout.node_ids))
        ]

    def links(self) -> list[dict[str, Any]]:
        """Every link as a dict with the keys of the command-line program's JSON results: id, kind,
        from, to, flow, velocity (None for pumps), headloss, status, reason when there is one, and
        for pumps head_gain, efficiency, hydraulic_power and shaft_power."""
        layout = self._layout
        out = []
        states = self.link_states
        for k in range(len(layout.link_ids)):
            word, reason = state_text(int(states[k]))
            item: dict[str, Any] = {
                "id": layout.link_ids[k],
                "kind": layout.link_kinds[k],
                "from": layout.link_from[k],
                "to": layout.link_to[k],
                "flow": float(self.flows[k]),
                "velocity": _finite_or_none(float(self.velocities[k])),
                "headloss": _finite_or_none(float(self.headlosses[k])),
                "status": word,
            }
            if reason:
                item["reason"] = reason
            if layout.link_kinds[k] == "pump":
                power = self.pump_power(k)
                item["head_gain"] = self.pump_head(k)
                item["efficiency"] = power["efficiency"]
                item["hydraulic_power"] = power["hydraulic"]
                item["shaft_power"] = power["shaft"]
            out.append(item)
        return out

    def to_pandas(self) -> Tables:
        """The results as pandas DataFrames (pandas is needed for this call only).

        Returns
        -------
        Tables
            ``nodes``: indexed by node id, columns kind, elevation, head, pressure, demand,
            connected; ``links``: indexed by link id, columns kind, from, to, flow, velocity,
            headloss, status. Values in the model's units (:attr:`units`).
        """
        import pandas as pd

        layout = self._layout
        nodes = pd.DataFrame(
            {
                "kind": list(layout.node_kinds),
                "elevation": np.asarray(layout.elevations),
                "head": self.heads,
                "pressure": self.pressures,
                "demand": self.demands,
                "connected": self.connected,
            },
            index=pd.Index(list(layout.node_ids), name="id"),
        )
        links = pd.DataFrame(
            {
                "kind": list(layout.link_kinds),
                "from": list(layout.link_from),
                "to": list(layout.link_to),
                "flow": self.flows,
                "velocity": self.velocities,
                "headloss": self.headlosses,
                "status": [state_text(int(s))[0] for s in self.link_states],
            },
            index=pd.Index(list(layout.link_ids), name="id"),
        )
        return Tables(nodes, links)

    @property
    def __geo_interface__(self) -> dict[str, Any]:
        """The solved network as a GeoJSON-like FeatureCollection: nodes as points with head,
        pressure and demand, links as lines between their end nodes with flow, velocity and head
        loss (``geometry`` None where coordinates are missing)."""
        node_values = {"head": self.heads, "pressure": self.pressures, "demand": self.demands}
        link_values = {"flow": self.flows, "velocity": self.velocities, "headloss": self.headlosses}
        return {"type": "FeatureCollection", "features": geo_features(self._layout, (node_values, link_values))}

    def __repr__(self) -> str:
        if self.closed:
            return "<ringmain.Results (closed)>"
        return f"<ringmain.Results: {len(self.node_ids)} nodes, {len(self.link_ids)} links, {self.iterations} iterations>"
