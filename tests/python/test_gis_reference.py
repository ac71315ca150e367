"""Geodesic lengths and snapping of `ringmain import` on longitude/latitude input, against the
`geographiclib` package (Karney, "Algorithms for geodesics", J. Geodesy 87, 2013: the reference
implementation by the author of the method, on the WGS 84 ellipsoid).

The pipes are invented: lines of several vertices at the equator, at mid and high latitudes, and
across the antimeridian, from a few metres to tens of kilometres long. Pipe ends are placed at
known geodesic distances with `Geodesic.WGS84.Direct` to check that --snap is measured in metres
along the ellipsoid.
"""

from __future__ import annotations

import json
import tomllib

import pytest
from geographiclib.geodesic import Geodesic

WGS84 = Geodesic.WGS84

# ringmain uses geographiclib-rs, a port of the same algorithm; both should agree to round-off.
# 1e-6 m (one micrometre) on lines of up to 60 km is ~1e-11 relative, far above round-off and far
# below any error of method (a spherical formula would be off by up to 0.5 %).
ABS_TOL_M = 1e-6

FIELDS = """
pipes.id = "ID"
pipes.diameter = "D"
pipes.roughness = "C"
[units]
length = "m"
diameter = "mm"
flow = "L/s"
[points]
id = "ID"
kind = "KIND"
head = "HEAD"
elevation = "Z"
[kinds]
"SOURCE" = "reservoir"
"""


def line(start, azimuth, steps):
    """Vertices from `start` (lat, lon) along a geodesic with the given azimuth, turning 30 deg
    at each vertex; `steps` are the segment lengths in metres."""
    lat, lon = start
    coords = [[lon, lat]]
    az = azimuth
    for s in steps:
        g = WGS84.Direct(lat, lon, az, s)
        lat, lon = g["lat2"], g["lon2"]
        coords.append([lon, lat])
        az += 30.0
    return coords


def geodesic_length(coords):
    return sum(
        WGS84.Inverse(a[1], a[0], b[1], b[0])["s12"] for a, b in zip(coords, coords[1:])
    )


def feature(pid, coords):
    return {
        "type": "Feature",
        "properties": {"ID": pid, "D": 200, "C": 120},
        "geometry": {"type": "LineString", "coordinates": coords},
    }


def source_at(lon, lat):
    return {
        "type": "Feature",
        "properties": {"ID": "SRC", "KIND": "SOURCE", "HEAD": 80.0, "Z": None},
        "geometry": {"type": "Point", "coordinates": [lon, lat]},
    }


def run_import(run_ringmain, tmp_path, pipes, points, *extra):
    (tmp_path / "fields.toml").write_text(FIELDS)
    (tmp_path / "pipes.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": pipes}))
    (tmp_path / "points.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": points}))
    model = tmp_path / "model.toml"
    report = tmp_path / "report.json"
    run_ringmain(
        "import", "--pipes", tmp_path / "pipes.geojson", "--points", tmp_path / "points.geojson",
        "--fields", tmp_path / "fields.toml", "--output", model, "--report", report,
        "--elevation-default", "0", *extra,
    )
    return tomllib.loads(model.read_text()), json.loads(report.read_text())


CASES = [
    ("equator", (0.0, 10.0), 90.0, [5.0, 1200.0, 35.0]),
    ("mid-latitude", (46.95, 7.44), 10.0, [250.0, 250.0, 250.0, 12.5]),
    ("high-latitude", (69.65, 18.96), 200.0, [3000.0, 40.0]),
    ("long-main", (-33.9, 18.4), 45.0, [20000.0, 20000.0, 20000.0]),
    ("antimeridian", (-17.0, 179.999), 80.0, [150.0, 300.0]),
]


@pytest.mark.parametrize("name,start,azimuth,steps", CASES, ids=[c[0] for c in CASES])
def test_lengths_are_wgs84_geodesics(run_ringmain, tmp_path, name, start, azimuth, steps):
    coords = line(start, azimuth, steps)
    # Longitudes past 180 written back into [-180, 180], as RFC 7946 requires.
    for c in coords:
        if c[0] > 180.0:
            c[0] -= 360.0
    model, report = run_import(
        run_ringmain, tmp_path, [feature("P1", coords)], [source_at(coords[0][0], coords[0][1])]
    )
    assert report["coordinates"] == "lonlat"
    assert model["map"]["coordinates"] == "lonlat"
    (link,) = model["links"]
    expected = geodesic_length(coords)
    assert abs(link["length"] - expected) <= ABS_TOL_M, (link["length"], expected)
    # Interior vertices are the link's path; nodes keep longitude, latitude.
    # (to a few units in the last place: JSON and TOML numbers are read back to within one or two)
    flat = lambda points: [c for p in points for c in p]  # noqa: E731
    assert flat(link["path"]) == pytest.approx(flat(coords[1:-1]), rel=1e-14, abs=1e-12)
    end = next(n for n in model["nodes"] if n["id"] == link["to"])
    assert [end["x"], end["y"]] == pytest.approx(coords[-1], rel=1e-14, abs=1e-12)


@pytest.mark.parametrize("gap,snap,joined", [(0.3, 0.5, True), (0.3, 0.2, False), (2.0, 0.5, False)])
def test_snap_distance_is_metres_on_the_ellipsoid(run_ringmain, tmp_path, gap, snap, joined):
    # Two pipes at 60 deg N whose ends are `gap` metres apart due east (a degree of longitude is
    # about half as long as at the equator there, so a planar snap in degrees would be wrong).
    lat, lon = 60.0, 24.9
    a = line((lat, lon), 270.0, [400.0])
    end = WGS84.Direct(lat, lon, 90.0, gap)
    b = [[end["lon2"], end["lat2"]], [end["lon2"], end["lat2"] + 0.004]]
    model, report = run_import(
        run_ringmain, tmp_path, [feature("P1", a), feature("P2", b)], [source_at(a[-1][0], a[-1][1])],
        "--snap", str(snap),
    )
    assert len(model["nodes"]) == (3 if joined else 4)
    near = report["counts"]["near_misses"]
    assert near == (0 if joined else (1 if gap <= 5 * snap else 0)), report
    if not joined and near:
        assert abs(report["near_misses"][0]["distance"] - gap) < 1e-6
