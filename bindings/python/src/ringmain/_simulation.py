"""The results of an extended-period simulation, as numpy arrays."""

from __future__ import annotations

import ctypes
from ctypes import byref, c_double, c_size_t
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from . import _ffi
from .errors import check

if TYPE_CHECKING:
    import pandas

    from ._model import Layout

lib = _ffi.lib
FloatArray = NDArray[np.float64]
_SERIES = _ffi.CONSTANTS["ringmain_series"]

#: The quantities of a run: name -> (series code, element of the columns).
QUANTITIES: dict[str, tuple[int, str]] = {
    "head": (_SERIES["RINGMAIN_SERIES_HEAD"], "node"),
    "pressure": (_SERIES["RINGMAIN_SERIES_PRESSURE"], "node"),
    "demand": (_SERIES["RINGMAIN_SERIES_DEMAND"], "node"),
    "flow": (_SERIES["RINGMAIN_SERIES_FLOW"], "link"),
    "status": (_SERIES["RINGMAIN_SERIES_STATUS"], "link"),
    "level": (_SERIES["RINGMAIN_SERIES_LEVEL"], "tank"),
    "volume": (_SERIES["RINGMAIN_SERIES_VOLUME"], "tank"),
    "pump_speed": (_SERIES["RINGMAIN_SERIES_PUMP_SPEED"], "pump"),
    "pump_power": (_SERIES["RINGMAIN_SERIES_PUMP_POWER"], "pump"),
}


@dataclass(frozen=True)
class Simulation:
    """An extended-period simulation: every reported time, and the series of each quantity as a
    (time × element) numpy array in the model's units.

    Attributes
    ----------
    times : ndarray
        Seconds from the start of the run, one per row of every series.
    series : dict of str to ndarray
        ``head``, ``pressure``, ``demand`` (columns: :attr:`node_ids`); ``flow`` and ``status``
        (0 open, 1 closed, 2 active; columns: :attr:`link_ids`); ``level``, ``volume`` (columns:
        :attr:`tank_ids`); ``pump_speed``, ``pump_power`` (columns: :attr:`pump_ids`).
    summary : dict
        Duration, clock time at the start, the volume balance (supplied, delivered,
        storage_change, not_delivered, discrepancy, in the length unit cubed), the lowest
        pressure of the run (node, value, time) and the work done (steps, rejected_steps, solves).
    events : list of (float, str)
        Each event's time (s) and description, in time order.

    The arrays are copies owned by Python: the native run is freed as soon as they are read.
    """

    times: FloatArray
    series: dict[str, FloatArray]
    node_ids: tuple[str, ...]
    link_ids: tuple[str, ...]
    tank_ids: tuple[str, ...]
    pump_ids: tuple[str, ...]
    summary: dict[str, Any]
    events: list[tuple[float, str]]
    units: dict[str, str]

    @classmethod
    def _from_run(cls, pointer: int, layout: Layout) -> Simulation:
        try:
            summary = _ffi.RunSummary()
            check(lib.ringmain_run_get_summary(pointer, byref(summary)))
            nt = int(summary.times)
            times = np.empty(nt)
            count = c_size_t()
            check(lib.ringmain_run_times(pointer, times.ctypes.data_as(_ffi.double_p), nt, byref(count)))
            columns: dict[str, NDArray[np.uintp]] = {}
            series: dict[str, FloatArray] = {}
            for name, (code, _) in QUANTITIES.items():
                width = c_size_t()
                status = lib.ringmain_run_columns(pointer, code, None, 0, byref(width))
                if status not in (_ffi.OK, _ffi.BUFFER_TOO_SMALL):
                    check(status)
                cols = np.empty(width.value, dtype=np.uintp)
                if width.value:
                    check(
                        lib.ringmain_run_columns(pointer, code, cols.ctypes.data_as(_ffi.size_p), width.value, byref(count))
                    )
                columns[name] = cols
                values = np.empty((nt, width.value))
                if values.size:
                    check(
                        lib.ringmain_run_series(
                            pointer, code, values.ctypes.data_as(_ffi.double_p), values.size, byref(count)
                        )
                    )
                values.setflags(write=False)
                series[name] = values
            events: list[tuple[float, str]] = []
            for e in range(int(summary.events)):
                when = c_double()
                needed = c_size_t()
                lib.ringmain_run_event(pointer, e, None, None, 0, byref(needed))
                buf = ctypes.create_string_buffer(needed.value)
                check(lib.ringmain_run_event(pointer, e, byref(when), buf, needed.value, byref(needed)))
                events.append((when.value, buf.value.decode("utf-8")))
        finally:
            lib.ringmain_run_free(pointer)
        lowest: dict[str, Any] | None = None
        if summary.has_lowest_pressure:
            lowest = {
                "node": layout.node_ids[summary.lowest_pressure_node],
                "pressure": summary.lowest_pressure,
                "time": summary.lowest_pressure_time,
            }
        info: dict[str, Any] = {
            "duration": summary.duration,
            "start_clock": summary.start_clock,
            "supplied": summary.supplied,
            "delivered": summary.delivered,
            "storage_change": summary.storage_change,
            "not_delivered": summary.not_delivered,
            "discrepancy": summary.discrepancy,
            "lowest_pressure": lowest,
            "steps": int(summary.steps),
            "rejected_steps": int(summary.rejected_steps),
            "solves": int(summary.solves),
        }
        times.setflags(write=False)
        return cls(
            times=times,
            series=series,
            node_ids=layout.node_ids,
            link_ids=layout.link_ids,
            tank_ids=tuple(layout.node_ids[int(i)] for i in columns["level"]),
            pump_ids=tuple(layout.link_ids[int(k)] for k in columns["pump_speed"]),
            summary=info,
            events=events,
            units=dict(layout.units),
        )

    def columns(self, quantity: str) -> tuple[str, ...]:
        """The ids of the columns of a quantity's series."""
        try:
            element = QUANTITIES[quantity][1]
        except KeyError:
            raise KeyError(f"unknown quantity {quantity!r}; expected one of {', '.join(QUANTITIES)}") from None
        return {"node": self.node_ids, "link": self.link_ids, "tank": self.tank_ids, "pump": self.pump_ids}[element]

    def __getitem__(self, quantity: str) -> FloatArray:
        """The series of a quantity: ``sim["pressure"]`` is (time × node)."""
        self.columns(quantity)
        return self.series[quantity]

    @property
    def heads(self) -> FloatArray:
        """Head, time × node (length unit)."""
        return self.series["head"]

    @property
    def pressures(self) -> FloatArray:
        """Pressure, time × node (pressure unit)."""
        return self.series["pressure"]

    @property
    def demands(self) -> FloatArray:
        """Demand, time × node (flow unit)."""
        return self.series["demand"]

    @property
    def flows(self) -> FloatArray:
        """Flow, time × link (flow unit)."""
        return self.series["flow"]

    @property
    def levels(self) -> FloatArray:
        """Tank level above the floor, time × tank (length unit)."""
        return self.series["level"]

    def to_pandas(self) -> dict[str, pandas.DataFrame]:
        """Wide, time-indexed DataFrames, one per quantity (pandas is needed for this call only).

        Returns
        -------
        dict of str to pandas.DataFrame
            Keyed by quantity (``"head"``, ``"pressure"``, ``"flow"``, ``"level"``...); each
            indexed by the time from the start (``pandas.TimedeltaIndex`` named ``time``), one
            column per element id.
        """
        import pandas as pd

        index = pd.to_timedelta(self.times, unit="s")
        index.name = "time"
        return {
            name: pd.DataFrame(values, index=index, columns=pd.Index(list(self.columns(name)), name="id"))
            for name, values in self.series.items()
        }

    def __repr__(self) -> str:
        return (
            f"<ringmain.Simulation: {self.times.shape[0]} times over {self.summary['duration'] / 3600:g} h, "
            f"{len(self.node_ids)} nodes, {len(self.link_ids)} links, {len(self.events)} events>"
        )
