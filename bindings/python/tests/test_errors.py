"""Errors surface as exceptions carrying the library's message."""

from __future__ import annotations

import math

import pytest
from conftest import HILLSIDE

import ringmain

SMALL = """
[[nodes]]
id = "Source"
kind = "reservoir"
head = 50.0
[[nodes]]
id = "J-1"
elevation = 10.0
demand = 5.0
[[links]]
id = "P-1"
from = "Source"
to = "J-1"
length = 400.0
diameter = 150
roughness = 120
"""


def test_bad_model_text_names_the_element_and_key():
    bad = SMALL.replace("roughness = 120\n", "")
    with pytest.raises(ringmain.ModelError) as e:
        ringmain.Model.from_toml(bad)
    assert e.value.status_name == "RINGMAIN_MODEL_INVALID"
    assert "link 'P-1': key 'roughness': is missing" in str(e.value)
    assert e.value.message == str(e.value)


def test_bad_json_and_a_misspelt_key():
    with pytest.raises(ringmain.ModelError, match=r"JSON text:1:\d+: JSON syntax error"):
        ringmain.Model.from_json('{"nodes": [')
    with pytest.raises(ringmain.ModelError, match=r"link 'P-1': key 'minor_los'.*did you mean 'minor_loss'\?"):
        ringmain.Model.from_toml(SMALL + "minor_los = 0.5\n")


def test_a_missing_file():
    with pytest.raises(ringmain.ModelError, match="cannot read the file") as e:
        ringmain.Model.load("/nonexistent/model.toml")
    assert e.value.status_name == "RINGMAIN_IO"


def test_unknown_ids_wrong_kinds_and_bad_values():
    with ringmain.Model.from_toml(SMALL) as m:
        with pytest.raises(ringmain.ModelError, match=r"no node has the id 'J-2' \(did you mean 'J-1'\?\)"):
            m.set_demand("J-2", 1.0)
        with pytest.raises(ringmain.ModelError, match="applies to junctions only; this one is a reservoir") as e:
            m.set_demand("Source", 1.0)
        assert e.value.status_name == "RINGMAIN_WRONG_KIND"
        with pytest.raises(ringmain.ModelError, match="node 'J-1': key 'demand': must be finite"):
            m.set_demand("J-1", math.inf)
        with pytest.raises(ringmain.ModelError, match="applies to pumps only"):
            m.set_pump_speed("P-1", 0.5)
        with pytest.raises(ringmain.ModelError, match='"automatic" applies to valves only'):
            m.set_link_status("P-1", "automatic")
        with pytest.raises(ValueError, match="unknown link status 'shut'"):
            m.set_link_status("P-1", "shut")
        with pytest.raises(IndexError):
            m.set_demand(5, 1.0)
        with pytest.raises(ringmain.ModelError, match="must end in .toml or .json"):
            m.save("/tmp/model.txt")
        # Nothing was changed by the failed calls.
        assert m.demand("J-1") == 5.0
        assert m.link_status("P-1") == "open"


def test_a_solve_that_does_not_converge_raises_solve_error():
    with ringmain.Model.load(HILLSIDE) as m:
        m.set_solver_options(max_iterations=1)
        with pytest.raises(ringmain.SolveError, match="did not converge in 1 iteration:") as e:
            m.solve()
        assert e.value.status_name == "RINGMAIN_NOT_CONVERGED"
        assert str(HILLSIDE) in str(e.value)
        m.set_solver_options()
        with m.solve() as r:
            assert r.iterations >= 1  # an answer (a solve that does not converge raises SolveError)


def test_a_model_without_a_source_cannot_be_solved():
    with ringmain.Model.new() as m:
        m.add_junction("A", 10.0, 1.0)
        with pytest.raises(ringmain.ModelError, match="no reservoir or tank"):
            m.validate()
        with pytest.raises(ringmain.ModelError, match="no reservoir or tank"):
            m.solve()


def test_closed_objects_refuse_to_work():
    m = ringmain.Model.from_toml(SMALL)
    r = m.solve()
    m.close()
    r.close()
    with pytest.raises(ValueError, match="this model is closed"):
        m.solve()
    with pytest.raises(ValueError, match="this results object is closed"):
        _ = r.heads
    m.close()  # closing twice is harmless
