"""Writes a ringmain JSON model as GeoJSON pipes and points with a fields file (for the import
benchmark, benches/import-cli.sh): every pipe (at least PIPES of them, else an error), each with an interior vertex at its
midpoint nudged 0.3 m sideways, and the nodes they use as points.

usage: python3 geojson_of_model.py MODEL.json PIPES OUT_DIR
"""

import json
import sys
from pathlib import Path

FIELDS = """pipes.id = "ASSET_ID"
pipes.diameter = "DIAM_MM"
pipes.roughness = "HW_C"
pipes.length = "LEN_M"
[crs]
units = "m"
[units]
length = "m"
diameter = "mm"
flow = "L/s"
[points]
id = "NODE_ID"
kind = "TYPE"
elevation = "Z_M"
demand = "DEMAND_LPS"
head = "HEAD_M"
[kinds]
"J" = "junction"
"R" = "reservoir"
"""


def main():
    model = json.loads(Path(sys.argv[1]).read_text())
    count = int(sys.argv[2])
    out = Path(sys.argv[3])
    nodes = {n["id"]: n for n in model["nodes"]}
    pipes = [l for l in model["links"] if l.get("kind", "pipe") == "pipe"]
    if len(pipes) < count:
        sys.exit(f"the model has only {len(pipes)} pipes")
    used = set()
    features = []
    for p in pipes:
        a, b = nodes[p["from"]], nodes[p["to"]]
        used.update((p["from"], p["to"]))
        mid = [(a["x"] + b["x"]) / 2 + 0.3, (a["y"] + b["y"]) / 2 - 0.2]
        features.append({"type": "Feature", "properties": {"ASSET_ID": p["id"], "DIAM_MM": p["diameter"],
                         "HW_C": p["roughness"], "LEN_M": None},
                         "geometry": {"type": "LineString", "coordinates": [[a["x"], a["y"]], mid, [b["x"], b["y"]]]}})
    points = []
    for nid in sorted(used):
        n = nodes[nid]
        reservoir = n.get("kind") == "reservoir"
        points.append({"type": "Feature", "properties": {"NODE_ID": nid, "TYPE": "R" if reservoir else "J",
                       "Z_M": n.get("elevation"), "DEMAND_LPS": n.get("demand"), "HEAD_M": n.get("head")},
                       "geometry": {"type": "Point", "coordinates": [n["x"], n["y"]]}})
    (out / "pipes.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    (out / "points.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": points}))
    (out / "fields.toml").write_text(FIELDS)


if __name__ == "__main__":
    main()
