#!/usr/bin/env python3
"""Compares two fire-flow JSON reports (`ringmain fire-flow ... --format json`), hydrant by
hydrant, as the fire-flow rounds in RESULTS.md compare a branch's binary with main's.

The reports agree when, for every hydrant (in the same order): `hydrant_limited`,
`system_limited` and `available` are within the stated accuracy of a fire flow (0.1 L/s, the
report's `flow_tolerance`; both reports must give flows in L/s), `limit`, `limiting_node` and the
notes are the same, and the static pressure is the same to 1e-9 of the report's unit. Prints the
largest differences and every mismatch; exits 1 when they do not agree.

    python3 benches/fire_flow_compare.py before.json after.json
"""
import json
import sys


def main(path_a, path_b):
    a, b = (json.load(open(p)) for p in (path_a, path_b))
    if a["units"] != b["units"] or a["units"].get("flow") != "L/s":
        sys.exit(f"units differ or are not L/s: {a['units']} vs {b['units']}")
    tolerance = min(a["flow_tolerance"], b["flow_tolerance"])
    ha, hb = a["hydrants"], b["hydrants"]
    if len(ha) != len(hb):
        sys.exit(f"{len(ha)} hydrants against {len(hb)}")
    worst = {"hydrant_limited": 0.0, "system_limited": 0.0, "available": 0.0}
    mismatches = 0
    for x, y in zip(ha, hb):
        if x["id"] != y["id"]:
            sys.exit(f"hydrants in another order: {x['id']} vs {y['id']}")
        for key in worst:
            if (x[key] is None) != (y[key] is None):
                print(f"{x['id']}: {key} {x[key]} vs {y[key]}")
                mismatches += 1
            elif x[key] is not None:
                worst[key] = max(worst[key], abs(x[key] - y[key]))
        for key in ("limit", "limiting_node", "notes"):
            if x[key] != y[key]:
                print(f"{x['id']}: {key} {x[key]} vs {y[key]}")
                mismatches += 1
        if abs(x["static_pressure"] - y["static_pressure"]) > 1e-9:
            print(f"{x['id']}: static pressure {x['static_pressure']} vs {y['static_pressure']}")
            mismatches += 1
    same = mismatches == 0 and all(v <= tolerance for v in worst.values())
    largest = ", ".join(f"{k} {v:.3g} L/s" for k, v in worst.items())
    print(f"{len(ha)} hydrants; largest differences: {largest}; mismatches: {mismatches}")
    print(f"the same within {tolerance} L/s" if same else "NOT the same")
    return 0 if same else 1


if __name__ == "__main__":
    if len(sys.argv) != 3:
        sys.exit(__doc__)
    sys.exit(main(sys.argv[1], sys.argv[2]))
