"""Parquet results read back with pyarrow (the Apache Arrow project's reference Python library)
and compared with the JSON results of the same run, value for value.

pyarrow is an independent reader of the format: a file it reads with the right types, the units in
the metadata and the same numbers as the JSON output shows that the tables are valid Parquet and
carry what the program computed.

Results are only as good as the model and its data; designs must be checked by a licensed engineer
against local codes and the utility's standards.
"""

from __future__ import annotations

import json
import math

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from conftest import REPO

SNAPSHOT = REPO / "examples" / "hillside.toml"
DAY = REPO / "examples" / "hillside-day.toml"


def _same(a, b) -> bool:
    """Equal numbers, or both missing (JSON null, Parquet null)."""
    if a is None or b is None:
        return a is None and b is None
    return a == b or math.isclose(a, b, rel_tol=1e-15, abs_tol=0.0)


def test_solve_tables_match_the_json_results(run_ringmain, solve_model, tmp_path):
    out = tmp_path / "tables"
    run_ringmain("solve", SNAPSHOT, "--format", "parquet", "--output", out)
    results = solve_model(SNAPSHOT)

    nodes = pq.read_table(out / "nodes.parquet")
    assert nodes.schema.field("head").type == pa.float64()
    assert nodes.schema.field("connected").type == pa.bool_()
    assert nodes.schema.field("id").type == pa.string()
    assert nodes.schema.field("head").metadata[b"unit"] == results["units"]["length"].encode()
    units = json.loads(nodes.schema.metadata[b"units"])
    # The table's name and the program are the file's key-value metadata.
    file_metadata = pq.read_metadata(out / "nodes.parquet").metadata
    assert file_metadata[b"table"] == b"nodes"
    assert file_metadata[b"producer"].startswith(b"ringmain ")
    assert units["pressure"] == results["units"]["pressure"]
    assert units["demand"] == results["units"]["flow"]

    rows = nodes.to_pylist()
    assert [r["id"] for r in rows] == [n["id"] for n in results["nodes"]]
    for row, node in zip(rows, results["nodes"]):
        for key in ("elevation", "head", "pressure", "demand"):
            assert _same(row[key], node[key]), (node["id"], key, row[key], node[key])
        assert row["connected"] == node["connected"]

    links = pq.read_table(out / "links.parquet").to_pylist()
    assert [r["id"] for r in links] == [link["id"] for link in results["links"]]
    for row, link in zip(links, results["links"]):
        for key in ("flow", "velocity", "headloss"):
            assert _same(row[key], link[key]), (link["id"], key, row[key], link[key])
        assert (row["from"], row["to"], row["status"]) == (link["from"], link["to"], link["status"])

    pumps = pq.read_table(out / "pumps.parquet").to_pylist()
    json_pumps = {link["id"]: link for link in results["links"] if link["kind"] == "pump"}
    assert {p["id"] for p in pumps} == set(json_pumps)
    for p in pumps:
        assert _same(p["head_gain"], json_pumps[p["id"]]["head_gain"])
        assert _same(p["shaft_power"], json_pumps[p["id"]]["shaft_power"])

    valves = pq.read_table(out / "valves.parquet").to_pylist()
    assert {v["id"] for v in valves} == {link["id"] for link in results["links"] if link["kind"] == "valve"}

    summary = {(r["quantity"], r["id"]): r["value"] for r in pq.read_table(out / "summary.parquet").to_pylist()}
    assert _same(summary[("total_demand", None)], results["summary"]["total_demand"])
    assert summary[("iterations", None)] == results["iterations"]


def test_simulation_long_tables_match_the_json_series(run_ringmain, tmp_path):
    out = tmp_path / "series"
    proc = run_ringmain("simulate", DAY, "--format", "parquet", "--output", out)
    assert "wrote" in proc.stdout and "nodes.parquet" in proc.stdout
    series = json.loads(run_ringmain("simulate", DAY, "--format", "json").stdout)["series"]

    nodes = pq.read_table(out / "nodes.parquet")
    assert nodes.schema.field("time_s").metadata[b"unit"] == b"s"
    assert nodes.num_rows == len(series) * len(series[0]["nodes"])
    times = nodes.column("time_s").to_pylist()
    assert times == sorted(times), "a long table in time order"
    by_key = {(r["time_s"], r["id"]): r for r in nodes.to_pylist()}
    for state in series:
        for node in state["nodes"]:
            row = by_key[(state["time_s"], node["id"])]
            for key in ("head", "pressure", "demand"):
                assert _same(row[key], node[key]), (state["time_s"], node["id"], key)

    links = pq.read_table(out / "links.parquet").to_pylist()
    assert len(links) == len(series) * len(series[0]["links"])
    link_rows = {(r["time_s"], r["id"]): r for r in links}
    for state in series[:: max(1, len(series) // 12)]:
        for link in state["links"]:
            row = link_rows[(state["time_s"], link["id"])]
            assert _same(row["flow"], link["flow"]) and row["status"] == link["status"]

    tanks = pq.read_table(out / "tanks.parquet").to_pylist()
    assert len(tanks) == sum(len(s["tanks"]) for s in series)
    tank_rows = {(r["time_s"], r["id"]): r for r in tanks}
    for state in series:
        for tank in state["tanks"]:
            assert _same(tank_rows[(state["time_s"], tank["id"])]["level"], tank["level"])

    prices = pq.read_table(out / "series.parquet").to_pylist()
    assert [p["price"] for p in prices] == [s["price"] for s in series]


def test_parquet_needs_an_output_directory(run_ringmain):
    proc = run_ringmain("solve", SNAPSHOT, "--format", "parquet", expect=2)
    assert "--output" in proc.stderr


@pytest.mark.parametrize("command,model", [("solve", SNAPSHOT), ("simulate", DAY)])
def test_parquet_over_a_file_is_refused_and_leaves_it(run_ringmain, tmp_path, command, model):
    target = tmp_path / "taken"
    target.write_text("keep me")
    proc = run_ringmain(command, model, "--format", "parquet", "--output", target, expect=4)
    assert "taken" in proc.stderr
    assert target.read_text() == "keep me"
