#!/usr/bin/env bash
# Benchmark of the water-quality transport: 7 days of water age and chlorine together on the
# generated network of 10 000 junctions (`ringmain generate`), hourly hydraulics, 5-minute
# transport steps. Prints the wall time of the run with and without the quality constituents
# (the hydraulics alone are the reference measured in the same run) and the segment counts.
# Usage: benches/quality.sh N   (N junctions, default 10 000; needs `cargo build --release` first)
set -euo pipefail
cd "$(dirname "$0")/.."
bin=target/release/ringmain
n=${1:-10000}
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
"$bin" generate --junctions "$n" --output "$dir/net.json" >/dev/null
python3 - "$dir" <<'PY'
import json, sys
d = sys.argv[1]
m = json.load(open(f"{d}/net.json"))
m["simulation"] = {"duration": "7d", "hydraulic_step": "1h", "report_interval": "6h"}
json.dump(m, open(f"{d}/hydraulics.json", "w"))
m["quality"] = [
    {"id": "age", "kind": "age"},
    {"id": "chlorine", "kind": "substance", "bulk_rate": -0.5, "wall_rate": -0.1, "diffusivity": 1.21e-9},
]
for n in m["nodes"]:
    if n.get("kind") == "reservoir":
        n["quality"] = {"chlorine": 1.0}
json.dump(m, open(f"{d}/quality.json", "w"))
PY
# Each run under /usr/bin/time: wall time, CPU (user) time and peak memory (max RSS).
measure() {
    local label=$1
    shift
    /usr/bin/time -f "$label|%e|%U|%M" -o "$dir/time" "$@" >/dev/null 2>"$dir/err" || {
        cat "$dir/err" >&2
        exit 1
    }
    cat "$dir/time" >>"$dir/times"
}
measure "hydraulics only (reference), summary" "$bin" simulate "$dir/hydraulics.json"
measure "hydraulics + age + chlorine, summary" "$bin" simulate "$dir/quality.json"
measure "hydraulics + age + chlorine, JSON of every 6 h written" \
    "$bin" simulate "$dir/quality.json" --format json --output "$dir/out.json"
python3 - "$dir" <<'PY'
import json, sys
d = sys.argv[1]
print("| run | wall | CPU (user) | peak memory |")
print("| --- | --- | --- | --- |")
for line in open(f"{d}/times"):
    label, wall, user, rss = line.strip().split("|")
    print(f"| {label} | {float(wall):.2f} s | {float(user):.2f} s | {int(rss) / 1024:.0f} MB |")
q = json.load(open(f"{d}/out.json"))["summary"]["quality"]
print(f"segments: at most {q['segments']['max']}, at the end {q['segments']['end']}; "
      f"{q['transport_steps']} transport steps")
for c in q["constituents"]:
    print(f"{c['id']}: mass balance relative discrepancy {c['mass_balance']['relative_discrepancy']:.1e}")
PY
