"""Extended-period simulation from Python: series as (time x element) arrays, checked against
conservation of mass, the geometry of a cylindrical tank and the command-line program."""

from __future__ import annotations

import json
import math
import subprocess

import numpy as np
import pytest
from conftest import HILLSIDE, HILLSIDE_DAY, cli_binary

import ringmain


@pytest.fixture(scope="module")
def run():
    with ringmain.Model.load(HILLSIDE_DAY) as m:
        yield m.simulate(), m.layout()


def test_series_have_one_row_per_time_and_one_column_per_element(run):
    sim, layout = run
    nt = sim.times.shape[0]
    assert sim.times[0] == 0.0 and np.all(np.diff(sim.times) > 0)
    assert sim.times[-1] == sim.summary["duration"] == 48 * 3600.0
    assert sim.heads.shape == (nt, len(layout.node_ids))
    assert sim.flows.shape == (nt, len(layout.link_ids))
    assert sim.tank_ids == ("Beacon Knoll Tank",)
    assert set(sim.pump_ids) == {"PU-1", "PU-2"}
    assert sim["level"].shape == (nt, 1)
    assert set(np.unique(sim["status"])) <= {0.0, 1.0, 2.0}


def test_mass_is_conserved_at_every_junction_at_every_time(run):
    # Conservation of mass at a node (the continuity equation every network solver satisfies):
    # inflow - outflow = demand, at each junction and each reported time.
    sim, layout = run
    start, end = layout.link_start, layout.link_end
    for t in range(0, sim.times.shape[0], 16):
        net = np.zeros(len(layout.node_ids))
        np.add.at(net, end, sim.flows[t])
        np.subtract.at(net, start, sim.flows[t])
        junctions = np.array([k == "junction" for k in layout.node_kinds])
        np.testing.assert_allclose(net[junctions], sim.demands[t][junctions], atol=1e-6)


def test_tank_volume_is_that_of_a_cylinder(run):
    # A cylindrical tank of diameter D holds pi/4 D^2 per metre of level (geometry); the model
    # gives Beacon Knoll Tank diameter = 16.0 m (examples/hillside-day.toml).
    sim, _ = run
    np.testing.assert_allclose(sim["volume"][:, 0], math.pi / 4 * 16.0**2 * sim["level"][:, 0], rtol=1e-12)


def test_volume_balance_closes(run):
    sim, _ = run
    s = sim.summary
    assert math.isclose(s["supplied"] - s["delivered"] - s["storage_change"], s["discrepancy"], abs_tol=1e-9)
    assert abs(s["discrepancy"]) < 1e-6 * s["supplied"]


def test_same_series_as_the_command_line_program(run, tmp_path):
    sim, _ = run
    out = tmp_path / "run.json"
    proc = subprocess.run(
        [str(cli_binary()), "simulate", str(HILLSIDE_DAY), "--format", "json", "--output", str(out)],
        capture_output=True,
        text=True,
        timeout=120,
        stdin=subprocess.DEVNULL,
    )
    assert proc.returncode == 0, proc.stderr
    data = json.loads(out.read_text())
    # The program and the library run the same engine: every value must agree exactly (the JSON
    # writer prints shortest round-trip floats).
    assert [row["time_s"] for row in data["series"]] == sim.times.tolist()
    layout_nodes = {n: i for i, n in enumerate(sim.node_ids)}
    for t, row in enumerate(data["series"]):
        assert [tank["level"] for tank in row["tanks"]] == sim["level"][t].tolist()
        for node in row["nodes"]:
            value = sim.heads[t, layout_nodes[node["id"]]]
            assert (node["head"] is None and math.isnan(value)) or node["head"] == value
    assert [(e["time_s"], e["what"]) for e in data["events"]] == sim.events
    balance = data["summary"]["volume_balance"]
    for key in ("supplied", "delivered", "storage_change", "not_delivered"):
        assert balance[key] == sim.summary[key]


def test_to_pandas_gives_wide_time_indexed_frames(run):
    pd = pytest.importorskip("pandas")
    sim, layout = run
    frames = sim.to_pandas()
    assert set(frames) == {"head", "pressure", "demand", "flow", "status", "level", "volume", "pump_speed", "pump_power"}
    p = frames["pressure"]
    assert isinstance(p.index, pd.TimedeltaIndex) and p.index.name == "time"
    assert list(p.columns) == list(layout.node_ids)
    assert p.loc[pd.Timedelta(hours=12), "J-101"] == sim.pressures[48, layout.node_index["J-101"]]
    assert list(frames["level"].columns) == ["Beacon Knoll Tank"]


def test_a_model_without_a_simulation_table_names_it():
    with ringmain.Model.load(HILLSIDE) as m, pytest.raises(ringmain.ModelError, match=r"\[simulation\]"):
        m.simulate()


def test_snapshot_to_pandas_and_geo_interface():
    pd = pytest.importorskip("pandas")
    with ringmain.Model.load(HILLSIDE_DAY) as m, m.solve() as r:
        tables = r.to_pandas()
        nodes, links = tables
        assert isinstance(nodes, pd.DataFrame) and nodes.index.name == "id"
        assert nodes.loc["J-101", "pressure"] == r.node_pressure("J-101")
        assert links.loc["PU-1", "flow"] == r.link_flow("PU-1")
        geo = r.__geo_interface__
        assert geo["type"] == "FeatureCollection"
        features = {f["id"]: f for f in geo["features"]}
        tank = features["Beacon Knoll Tank"]
        assert tank["geometry"] == {"type": "Point", "coordinates": (1560.0, 2010.0)}
        assert tank["properties"]["head"] == r.node_head("Beacon Knoll Tank")
        pipe = m.link_ids("pipe")[0]
        a, b = m.link_nodes(pipe)
        line = features[pipe]["geometry"]
        assert line["type"] == "LineString"
        assert line["coordinates"][0] == features[a]["geometry"]["coordinates"]
        assert line["coordinates"][1] == features[b]["geometry"]["coordinates"]
        assert features[pipe]["properties"]["flow"] == r.link_flow(pipe)
        model_geo = m.__geo_interface__
        assert len(model_geo["features"]) == m.node_count + m.link_count
