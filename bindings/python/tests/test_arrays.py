"""Whole arrays both ways: one call sets every demand, status, setting, speed, roughness or
diameter, and reads every id, kind, end and coordinate; they agree with the one-element calls."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import HILLSIDE, HILLSIDE_DAY

import ringmain


def test_every_demand_set_in_one_call_solves_as_one_at_a_time():
    with ringmain.Model.load(HILLSIDE) as a, ringmain.Model.load(HILLSIDE) as b:
        demands = a.demands()
        kinds = a.layout().node_kinds
        assert [math.isnan(d) for d in demands] == [k != "junction" for k in kinds]
        new = demands * 1.7
        a.set_demands(new)
        for i, d in enumerate(new):
            if not math.isnan(d):
                b.set_demand(i, float(d))
        with a.solve() as ra, b.solve() as rb:
            np.testing.assert_array_equal(ra.heads, rb.heads)
            np.testing.assert_array_equal(ra.flows, rb.flows)
            np.testing.assert_allclose(ra.demands[~np.isnan(new)], new[~np.isnan(new)], rtol=1e-15)


def test_a_mapping_changes_only_the_elements_it_names():
    with ringmain.Model.load(HILLSIDE) as m:
        before = m.demands()
        m.set_demands({"J-109": 9.5, np.int64(m.node_index("J-101")): 1.25})
        after = m.demands()
        assert after[m.node_index("J-109")] == 9.5 and after[m.node_index("J-101")] == 1.25
        changed = np.flatnonzero(~np.isclose(before, after, equal_nan=True))
        assert sorted(changed.tolist()) == sorted([m.node_index("J-109"), m.node_index("J-101")])


def test_whole_array_setters_are_all_or_nothing():
    with ringmain.Model.load(HILLSIDE) as m:
        before = m.demands()
        bad = np.where(np.isnan(before), np.nan, 2.0)
        reservoir = m.node_ids("reservoir")[0]
        bad[m.node_index(reservoir)] = 1.0
        with pytest.raises(ringmain.WrongKindError, match="demand") as e:
            m.set_demands(bad)
        assert isinstance(e.value, TypeError) and reservoir in str(e.value)
        np.testing.assert_array_equal(m.demands(), before)
        with pytest.raises(ringmain.InvalidValueError):
            m.set_demands(before[:-1])
        diameters = m.pipe_diameters()
        bad_d = diameters.copy()
        pipes = np.flatnonzero(~np.isnan(diameters))
        bad_d[pipes[0]] = 300.0
        bad_d[pipes[-1]] = -5.0
        with pytest.raises(ringmain.InvalidValueError, match="diameter"):
            m.set_pipe_diameters(bad_d)
        np.testing.assert_array_equal(m.pipe_diameters(), diameters)


def test_every_link_array_round_trips():
    with ringmain.Model.load(HILLSIDE_DAY) as m:
        for getter, setter in [
            (m.pump_speeds, m.set_pump_speeds),
            (m.valve_settings, m.set_valve_settings),
            (m.pipe_roughnesses, m.set_pipe_roughnesses),
            (m.pipe_diameters, m.set_pipe_diameters),
        ]:
            values = getter()
            setter(values)
            np.testing.assert_array_equal(getter(), values)
        statuses = m.link_statuses()
        pipe = m.link_ids("pipe")[0]
        m.set_link_statuses({pipe: "closed"})
        assert m.link_status(pipe) == "closed"
        statuses2 = m.link_statuses()
        assert [s for i, s in enumerate(statuses2) if i != m.link_index(pipe)] == [
            s for i, s in enumerate(statuses) if i != m.link_index(pipe)
        ]
        m.set_link_statuses(statuses)
        assert m.link_statuses() == statuses
        with m.solve() as r:
            assert r.iterations >= 1  # an answer (a solve that does not converge raises SolveError)


def test_the_structure_in_a_few_calls_matches_the_element_calls():
    with ringmain.Model.load(HILLSIDE_DAY) as m:
        layout = m.layout()
        assert len(layout.node_ids) == m.node_count and len(layout.link_ids) == m.link_count
        for k in range(m.link_count):
            assert m.link_nodes(k) == (layout.link_from[k], layout.link_to[k])
        # Coordinates and zones as written in the file (values read from examples/hillside-day.toml).
        tank = layout.node_index["Beacon Knoll Tank"]
        assert (layout.x[tank], layout.y[tank]) == (1560.0, 2010.0)
        assert layout.zones[tank] == "supply"


def test_numpy_integers_are_indices_and_bools_are_not():
    with ringmain.Model.load(HILLSIDE) as m:
        i = m.node_index("J-109")
        for index in (np.int64(i), np.int32(i), np.uint16(i), np.intp(i)):
            assert m.demand(index) == m.demand("J-109")
        with pytest.raises(TypeError, match="argument 'node'.*got bool"):
            m.demand(True)
        with pytest.raises(TypeError, match="argument 'node'.*got bool"):
            m.demand(np.bool_(True))
        with pytest.raises(IndexError):
            m.demand(m.node_count)
        with pytest.raises(IndexError):
            m.demand(-1)


def test_misaligned_and_strided_arrays_are_accepted():
    # Regression (found by the Dask sweep): arrays unpickled from a byte buffer can be
    # misaligned; they are copied to an aligned buffer instead of being refused by the library.
    with ringmain.Model.load(HILLSIDE) as m:
        demands = m.demands() * 1.1
        raw = bytearray(demands.nbytes + 1)
        misaligned = np.frombuffer(raw, dtype=np.float64, count=demands.shape[0], offset=1)
        assert not misaligned.flags.aligned
        misaligned[:] = demands
        m.set_demands(misaligned)
        np.testing.assert_allclose(m.demands(), demands, rtol=1e-15)
        strided = np.repeat(demands * 1.2, 2)[::2]
        assert not strided.flags.c_contiguous
        m.set_demands(strided)
        np.testing.assert_allclose(m.demands(), demands * 1.2, rtol=1e-15)
        m.set_demands(list(demands))
        np.testing.assert_allclose(m.demands(), demands, rtol=1e-15)
