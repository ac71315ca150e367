"""The results of one solve."""

from __future__ import annotations

import math
from ctypes import byref, c_bool, c_char_p, c_double, c_size_t, c_uint32
from typing import TYPE_CHECKING, Any, Union

from . import _ffi
from ._handle import Handle
from .errors import check

try:  # numpy is optional: arrays are numpy arrays when it is installed, lists otherwise
    import numpy as _np
except ImportError:  # pragma: no cover - exercised only without numpy
    _np = None

if TYPE_CHECKING:
    from ._model import Layout

lib = _ffi.lib
Element = Union[str, int]
_STATE_TEXT: dict[int, tuple[str, str]] = {}


def state_text(state: int) -> tuple[str, str]:
    """The status word ("open", "closed" or "active") and the reason ("" when the word says all)
    of a link state code."""
    if state not in _STATE_TEXT:
        word, reason = c_char_p(), c_char_p()
        check(lib.ringmain_link_state_text(state, byref(word), byref(reason)))
        _STATE_TEXT[state] = ((word.value or b"").decode(), (reason.value or b"").decode())
    return _STATE_TEXT[state]


def _finite_or_none(v: float) -> float | None:
    return v if math.isfinite(v) else None


class Results(Handle):
    """One solved snapshot, in the units of its model (``units``). Independent of the model: it
    stays valid when the model changes or is closed. Arrays (``heads``, ``flows``...) are numpy
    arrays when numpy is installed, else lists, in node or link order."""

    _free = staticmethod(lib.ringmain_results_free)
    _what = "results object"

    def __init__(self, pointer: int, layout: "Layout") -> None:
        super().__init__(pointer)
        self._layout = layout
        self._cache: dict[str, Any] = {}

    # -- statistics ---------------------------------------------------------------------------

    def _stat(self, call, ctype):
        value = ctype()
        check(call(self._ptr, byref(value)))
        return value.value

    @property
    def converged(self) -> bool:
        """Always True for results (a solve that does not converge raises ``SolveError``)."""
        return bool(self._stat(lib.ringmain_results_converged, c_bool))

    @property
    def iterations(self) -> int:
        """Newton iterations (linear solves) of the solve."""
        return self._stat(lib.ringmain_results_iterations, c_uint32)

    @property
    def status_changes(self) -> int:
        """Device state changes (check valves, pumps, control valves) made during the solve."""
        return self._stat(lib.ringmain_results_status_changes, c_uint32)

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
        from ._model import _text

        n = self._stat(lib.ringmain_results_warning_count, c_size_t)
        return [_text(lib.ringmain_results_warning, self._ptr, i) for i in range(n)]

    # -- whole-network arrays -------------------------------------------------------------------

    def _array(self, name: str, call, count: int, ctype=c_double):
        if name not in self._cache:
            buf = (ctype * count)()
            n = c_size_t()
            check(call(self._ptr, buf, count, byref(n)))
            if _np is not None and ctype is c_double:
                self._cache[name] = _np.array(buf, dtype=float)
                self._cache[name].setflags(write=False)
            else:
                self._cache[name] = list(buf)
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
    def heads(self):
        """Head of every node (length unit; NaN where cut off from every source)."""
        return self._array("heads", lib.ringmain_results_heads, len(self.node_ids))

    @property
    def pressures(self):
        """Pressure of every node (pressure unit; NaN where cut off)."""
        return self._array("pressures", lib.ringmain_results_pressures, len(self.node_ids))

    @property
    def demands(self):
        """Demand of every node (flow unit)."""
        return self._array("demands", lib.ringmain_results_demands, len(self.node_ids))

    @property
    def connected(self) -> list[bool]:
        """Whether each node has an open path to a reservoir or tank."""
        return self._array("connected", lib.ringmain_results_connected, len(self.node_ids), c_bool)

    @property
    def flows(self):
        """Flow of every link (flow unit; positive from its start node to its end node)."""
        return self._array("flows", lib.ringmain_results_flows, len(self.link_ids))

    @property
    def velocities(self):
        """Mean velocity of every link (length unit per second)."""
        return self._array("velocities", lib.ringmain_results_velocities, len(self.link_ids))

    @property
    def headlosses(self):
        """Head difference across every link (length unit; NaN where an end is cut off)."""
        return self._array("headlosses", lib.ringmain_results_headlosses, len(self.link_ids))

    @property
    def link_states(self) -> list[int]:
        """State code of every link (see ``state_text``)."""
        return self._array("states", lib.ringmain_results_link_states, len(self.link_ids), c_uint32)

    # -- one element ----------------------------------------------------------------------------

    def node_index(self, node: Element) -> int:
        """Index of a node in these results."""
        if isinstance(node, int):
            if not 0 <= node < len(self.node_ids):
                raise IndexError(f"node index {node} is out of range ({len(self.node_ids)} nodes)")
            return node
        i = c_size_t()
        check(lib.ringmain_results_node_index(self._ptr, node.encode("utf-8"), byref(i)))
        return i.value

    def link_index(self, link: Element) -> int:
        """Index of a link in these results."""
        if isinstance(link, int):
            if not 0 <= link < len(self.link_ids):
                raise IndexError(f"link index {link} is out of range ({len(self.link_ids)} links)")
            return link
        k = c_size_t()
        check(lib.ringmain_results_link_index(self._ptr, link.encode("utf-8"), byref(k)))
        return k.value

    def _one(self, call, index: int) -> float:
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
        return [
            {
                "id": layout.node_ids[i],
                "kind": layout.node_kinds[i],
                "elevation": layout.elevations[i],
                "head": _finite_or_none(float(self.heads[i])),
                "pressure": _finite_or_none(float(self.pressures[i])),
                "demand": float(self.demands[i]),
                "connected": bool(self.connected[i]),
            }
            for i in range(len(layout.node_ids))
        ]

    def links(self) -> list[dict[str, Any]]:
        """Every link as a dict with the keys of the command-line program's JSON results: id, kind,
        from, to, flow, velocity (None for pumps), headloss, status, reason when there is one, and
        for pumps head_gain, efficiency, hydraulic_power and shaft_power."""
        layout = self._layout
        out = []
        for k in range(len(layout.link_ids)):
            word, reason = state_text(self.link_states[k])
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

    def __repr__(self) -> str:
        if self.closed:
            return "<ringmain.Results (closed)>"
        return f"<ringmain.Results: {len(self.node_ids)} nodes, {len(self.link_ids)} links, {self.iterations} iterations>"


