#!/usr/bin/env bash
# Benchmark of pressure-dependent demand: the generated network (`ringmain generate --seed 7`,
# default 100 000 junctions) with every demand times a factor (default 2.5) solved twice in the
# same run, demand-driven (the reference) and with `[pressure_demand]` (full at 20 m, zero at 0 m,
# exponent 0.5), so that a third or so of the junctions are below full pressure. Prints the
# iterations, the solver's own time (`--timings`, best of three) and the share of junctions below
# full pressure of each. Target: the pressure-dependent solve takes at most twice the iterations
# and twice the time of the demand-driven one.
# Usage: [BIN=path/to/ringmain] benches/pressure_demand.sh [N] [FACTOR]   (needs `cargo build --release` first)
set -euo pipefail
cd "$(dirname "$0")/.."
bin=${BIN:-target/release/ringmain}
n=${1:-100000}
factor=${2:-2.5}
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
"$bin" generate --junctions "$n" --seed 7 --output "$dir/net.json" >/dev/null
python3 - "$dir" "$factor" <<'PY'
import json, sys
d, factor = sys.argv[1], float(sys.argv[2])
m = json.load(open(f"{d}/net.json"))
for node in m["nodes"]:
    if node.get("kind", "junction") == "junction":
        node["demand"] *= factor
json.dump(m, open(f"{d}/demand.json", "w"))
m["pressure_demand"] = {"full_pressure": 20.0, "zero_pressure": 0.0, "exponent": 0.5}
json.dump(m, open(f"{d}/pressure.json", "w"))
PY
echo "load before: $(cut -d' ' -f1-3 /proc/loadavg)"
for case in demand pressure; do
    best=""
    for _ in 1 2 3; do
        "$bin" solve "$dir/$case.json" --format json --output "$dir/$case.out.json" --timings 2>"$dir/t"
        t=$(grep "solver in all" "$dir/t" | awk '{print $4}')
        if [ -z "$best" ] || awk "BEGIN{exit !($t < $best)}"; then best=$t; fi
    done
    python3 - "$dir/$case.out.json" "$case" "$best" "$(head -1 "$dir/t" | grep -o '[0-9]* iterations$')" <<'PY'
import json, sys
r = json.load(open(sys.argv[1]))
p = [x["pressure"] for x in r["nodes"] if x["kind"] == "junction"]
below = sum(1 for v in p if v < 20.0) / len(p)
extra = ""
if "shortfall_percent" in r["summary"]:
    extra = f", shortfall {r['summary']['shortfall_percent']:.2f} % of the demand asked"
print(f"{sys.argv[2]:>8}: {sys.argv[4]}, solver {sys.argv[3]} ms (best of 3), {100*below:.1f} % of junctions below 20 m{extra}")
PY
done
echo "load after: $(cut -d' ' -f1-3 /proc/loadavg)"
