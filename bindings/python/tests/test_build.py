"""Building a model from scratch in Python, every kind of element, and the library lookup."""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

import ringmain


def _tower_network() -> ringmain.Model:
    m = ringmain.Model.new()  # m, mm, L/s, m of water, Hazen-Williams
    m.add_reservoir("Lake", 100.0)
    m.add_reservoir("Well", 20.0)
    m.add_tank("Tower", elevation=60.0, level=5.0, min_level=1.0, max_level=10.0)
    assert m.add_junction("J-1", 50.0, 10.0) == 3
    m.add_junction("J-2", 40.0, 5.0)
    m.add_junction("J-7", 30.0)
    assert m.add_pipe("P-1", "Lake", "J-1", 1000.0, 300.0, 130.0) == 0
    m.add_valve("PRV", "J-1", "J-2", "pressure-reducing", diameter=200.0, setting=30.0, minor_loss=0.5)
    m.add_pump("PU-1", "Well", "J-7", head_curve=[(0.0, 60.0), (10.0, 55.0), (20.0, 40.0)])
    m.add_pipe("P-7", "J-7", "Tower", 800.0, 200.0, 130.0, check_valve=True)
    m.add_pipe("P-2", "J-1", "Tower", 600.0, 150.0, 120.0)
    return m


def test_build_solve_and_change_every_kind_of_value():
    with _tower_network() as m:
        assert m.node_ids("reservoir") == ["Lake", "Well"]
        assert m.link_ids("valve") == ["PRV"]
        assert m.link_nodes("PU-1") == ("Well", "J-7")
        assert m.node_kind("Tower") == "tank" and m.link_kind("PU-1") == "pump"
        assert m.valve_type("PRV") == "pressure-reducing" and m.link_status("PRV") == "automatic"
        with m.solve() as r:
            # The pressure-reducing valve holds its setting downstream.
            assert r.link_state("PRV")[0] == "active"
            assert math.isclose(r.node_pressure("J-2"), 30.0, abs_tol=1e-6)
            assert r.pump_head("PU-1") > 0.0
            power = r.pump_power("PU-1")
            assert math.isclose(power["shaft"], power["hydraulic"] / 0.75, rel_tol=1e-12)
            # Pressure in m of water is the head above the node.
            assert math.isclose(r.node_pressure("J-1"), r.node_head("J-1") - m.elevation("J-1"), abs_tol=1e-9)
        m.set_valve_setting("PRV", 25.0)
        m.set_reservoir_head("Lake", 105.0)
        m.set_tank_level("Tower", 7.0)
        m.set_pipe_diameter("P-1", 250.0)
        m.set_pipe_roughness("P-1", 110.0)
        m.set_pump_efficiency("PU-1", 80.0)
        m.set_water_temperature(15.0)
        assert (m.valve_setting("PRV"), m.reservoir_head("Lake"), m.tank_level("Tower")) == (25.0, 105.0, 7.0)
        assert (m.pipe_diameter("P-1"), m.pipe_roughness("P-1")) == (250.0, 110.0)
        with m.solve() as r:
            assert math.isclose(r.node_pressure("J-2"), 25.0, abs_tol=1e-6)
            assert math.isclose(r.node_head("Tower"), 67.0, abs_tol=1e-12)
            assert math.isclose(r.pump_power("PU-1")["efficiency"], 80.0)
        m.set_pump_speed("PU-1", 0.0)
        m.set_link_status("P-2", "closed")
        with m.solve() as r:
            assert r.link_state("PU-1") == ("closed", "speed is zero")
            assert r.link_flow("PU-1") == 0.0
            assert r.link_status("P-2") == "closed"
            # J-1 now feeds only J-2 through the valve: P-1 carries both demands.
            assert math.isclose(r.link_flow("P-1"), 15.0, rel_tol=1e-9)


def test_power_pumps_and_us_units():
    with ringmain.Model.new(length="ft", diameter="in", flow="gpm", pressure="psi") as m:
        assert m.units["power"] == "hp" and m.units["velocity"] == "ft/s"
        m.add_reservoir("Sump", 50.0)
        m.add_reservoir("Hill", 200.0)
        m.add_junction("J", 40.0, 0.0)
        m.add_pump("PU", "Sump", "J", power=20.0)
        m.add_pipe("P", "J", "Hill", 2000.0, 8.0, 120.0)
        with m.solve() as r:
            # A constant-power pump delivers its power: rho g Q H = 20 hp.
            assert math.isclose(r.pump_power("PU")["hydraulic"], 20.0, rel_tol=1e-6)


def test_save_and_read_back(tmp_path: Path):
    with ringmain.Model.new(flow="m3/h", headloss="darcy-weisbach") as m:
        m.add_reservoir("R", 80.0)
        m.add_junction("J", 10.0, 36.0)
        m.add_pipe("P", "R", "J", 500.0, 150.0, 0.05)
        for name in ("model.toml", "model.json"):
            m.save(tmp_path / name)
            with ringmain.Model.load(tmp_path / name) as back:
                assert back.headloss == "darcy-weisbach"
                assert back.units["flow"] == "m3/h"
                assert back.pipe_roughness("P") == pytest.approx(0.05)
                with m.solve() as a, back.solve() as b:
                    assert b.node_head("J") == pytest.approx(a.node_head("J"), rel=1e-12)
        with ringmain.Model.from_json(m.to_json()) as again:
            assert again.demand("J") == pytest.approx(36.0)


def _python(code: str, **env: str) -> subprocess.CompletedProcess:
    environment = {k: v for k, v in os.environ.items() if k != "RINGMAIN_LIBRARY"}
    environment.update(env)
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=environment, timeout=60)


def test_a_missing_library_is_a_clear_error():
    proc = _python("import ringmain", RINGMAIN_LIBRARY="/nonexistent/libringmain.so")
    assert proc.returncode != 0
    assert "cannot find the ringmain library" in proc.stderr
    assert "/nonexistent/libringmain.so (RINGMAIN_LIBRARY)" in proc.stderr
    assert "pip install ./bindings/python" in proc.stderr


def test_the_library_is_found_by_the_documented_rules():
    proc = _python("from ringmain import _ffi; print('\\n'.join(f'{r}|{p}' for r, p in _ffi.candidates()))")
    assert proc.returncode == 0, proc.stderr
    rules = [line.split("|")[0] for line in proc.stdout.splitlines()]
    rules = [r for r in rules if r != "inside the package"]
    assert rules[:2] == ["beside the package", "beside the package"]
    assert "the Cargo workspace" in rules
    assert ringmain.version() == ringmain.__version__


def test_the_installed_package_carries_its_stripped_library():
    from ringmain import _ffi

    here = Path(_ffi.__file__).resolve().parent
    if "site-packages" not in here.parts:
        pytest.skip("the package runs from the source tree, not from `pip install`")
    inside = _ffi._in_package(here)
    assert len(inside) == 1, f"pip install must put the library inside {here}"
    proc = _python(
        "from ringmain import _ffi; print(_ffi.candidates()[0][0]); "
        "print(open('/proc/self/maps').read() if __import__('os').path.exists('/proc/self/maps') else '')"
    )
    assert proc.returncode == 0, proc.stderr
    first, maps = proc.stdout.split("\n", 1)
    assert first == "inside the package"
    if maps.strip():
        assert str(inside[0]) in maps  # the library loaded is the one inside the package
    sections = subprocess.run(["readelf", "-S", str(inside[0])], capture_output=True, text=True, timeout=60)
    if sections.returncode == 0:
        # setuptools-rust strips with `strip -x`: no debug information, no local symbols.
        assert ".debug_" not in sections.stdout, "the library carries debug information"
