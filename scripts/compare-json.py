#!/usr/bin/env python3
"""Compares two JSON reports of ringmain: every number to 1e-6 (absolute, or relative to values
above one), every other value exactly; keys named `iterations` are left out (a change of the
solver's path may change them, never the answer). Exits 1 on any difference and prints the
first twenty.

    scripts/compare-json.py before.json after.json
"""
import json
import sys


def walk(a, b, path, out):
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            out.append(f"{path}: keys {sorted(set(a) ^ set(b))}")
        for k in a:
            if k in b and k != "iterations":
                walk(a[k], b[k], f"{path}.{k}", out)
    elif isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            out.append(f"{path}: lengths {len(a)} vs {len(b)}")
        for i, (x, y) in enumerate(zip(a, b)):
            walk(x, y, f"{path}[{i}]", out)
    elif isinstance(a, bool) or isinstance(b, bool) or a is None or b is None or isinstance(a, str):
        if a != b:
            out.append(f"{path}: {a!r} vs {b!r}")
    elif isinstance(a, (int, float)) and isinstance(b, (int, float)):
        if not abs(a - b) <= 1e-6 * max(1.0, abs(a), abs(b)):
            out.append(f"{path}: {a} vs {b}")
    else:
        out.append(f"{path}: {a!r} vs {b!r}")


def numbers(x):
    if isinstance(x, dict):
        return sum(numbers(v) for v in x.values())
    if isinstance(x, list):
        return sum(numbers(v) for v in x)
    return int(isinstance(x, (int, float)) and not isinstance(x, bool))


def main():
    a, b = (json.load(open(p)) for p in sys.argv[1:3])
    out = []
    walk(a, b, "", out)
    print(f"{numbers(a)} numbers compared, {len(out)} differences")
    for line in out[:20]:
        print(line)
    sys.exit(1 if out else 0)


if __name__ == "__main__":
    main()
