#!/usr/bin/env bash
# Reading, writing and streaming benchmarks of the whole `ringmain` program, side by side with a
# peer measured in the same run (benches/peer/gradient_peer.py: the gradient method in Python
# with scipy and CHOLMOD). Figures go to benches/RESULTS.md ("Reading and writing" section).
#
#   cargo build --release
#   benches/io.sh [WORK_DIR]          # 1e4, 1e5; add RINGMAIN_BENCH_MILLION=1 for 1e6
#   PEER_PYTHON=/path/to/python benches/io.sh   # a Python with numpy, scipy, scikit-sparse
#                                     # (benches/peer/setup.sh makes one, versions pinned)
#   BASE_BIN=/path/to/older/ringmain benches/io.sh   # an earlier build, measured in the same run
#   SERIES=0 benches/io.sh            # without the time series part
#
# Each figure is the least wall time of REPEAT runs (default 3) and the peak resident memory of
# that run (GNU time's "maximum resident set size"). Nothing here is a test: CI does not run it.
set -euo pipefail
cd "$(dirname "$0")/.."
BIN="$PWD/target/release/ringmain"
WORK="${1:-${TMPDIR:-/tmp}/ringmain-io-bench}"
REPEAT="${REPEAT:-3}"
PEER_PYTHON="${PEER_PYTHON:-}"
BASE_BIN="${BASE_BIN:-}"
mkdir -p "$WORK"
[ -x "$BIN" ] || { echo "build first: cargo build --release" >&2; exit 1; }
[ -x /usr/bin/time ] || { echo "needs GNU time (/usr/bin/time)" >&2; exit 1; }

# least wall time (s), least processor time (user + system, s) and the peak memory (MB) of
# REPEAT runs of a command. On a shared machine the processor time is the steadier figure.
measure() {
  local label="$1"; shift
  local best="" cpu="" mem=""
  for _ in $(seq "$REPEAT"); do
    /usr/bin/time -f "%e %M %U %S" -o "$WORK/time.txt" "$@" > "$WORK/stdout.txt" 2> "$WORK/stderr.txt" || {
      echo "failed: $*" >&2; cat "$WORK/stderr.txt" >&2; return 1; }
    read -r wall kib user sys < "$WORK/time.txt"
    local c; c=$(awk "BEGIN{print $user + $sys}")
    if [ -z "$best" ] || awk "BEGIN{exit !($wall < $best)}"; then best=$wall; fi
    if [ -z "$cpu" ] || awk "BEGIN{exit !($c < $cpu)}"; then cpu=$c; fi
    mem=$kib
  done
  printf '%-58s wall %8.3f s  cpu %8.3f s %9.1f MB\n' "$label" "$best" "$cpu" "$(awk "BEGIN{print $mem*1.024/1000}")"
}

# the --timings line of one phase, ms (least of REPEAT runs)
phase() {
  local name="$1"; shift
  local best=""
  for _ in $(seq "$REPEAT"); do
    "$@" --timings > /dev/null 2> "$WORK/timings.txt"
    local v
    v=$(grep "  $name" "$WORK/timings.txt" | sed -E 's/^ *[a-z ]+ +([0-9.]+) ms.*/\1/' | head -1)
    if [ -z "$best" ] || awk "BEGIN{exit !($v < $best)}"; then best=$v; fi
  done
  echo "$best"
}

sizes="10000 100000"
[ "${RINGMAIN_BENCH_MILLION:-0}" = 1 ] && sizes="$sizes 1000000"
echo "machine: $(nproc) cores, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | xargs), load $(cut -d' ' -f1 /proc/loadavg)"
for n in $sizes; do
  json="$WORK/g$n.json"; toml="$WORK/g$n.toml"
  measure "generate $n (JSON)" "$BIN" generate --junctions "$n" --seed 7 --output "$json"
  measure "generate $n (TOML)" "$BIN" generate --junctions "$n" --seed 7 --output "$toml"
  echo "  model sizes: JSON $(du -m "$json" | cut -f1) MB, TOML $(du -m "$toml" | cut -f1) MB"
  measure "solve $n JSON -> JSON file (whole process)" "$BIN" solve "$json" --format json --output "$WORK/r$n.json"
  echo "  reading JSON: $(phase 'reading the model' "$BIN" solve "$json" --format json --output "$WORK/r$n.json") ms;" \
       "writing: $(phase 'writing the results' "$BIN" solve "$json" --format json --output "$WORK/r$n.json") ms"
  measure "solve $n TOML -> JSON file (whole process)" "$BIN" solve "$toml" --format json --output "$WORK/r$n.json"
  echo "  reading TOML: $(phase 'reading the model' "$BIN" solve "$toml" --format json --output "$WORK/r$n.json") ms"
  if [ -n "$BASE_BIN" ]; then
    measure "before: solve $n JSON -> JSON file" "$BASE_BIN" solve "$json" --format json --output "$WORK/b$n.json"
    echo "  before, reading JSON: $(phase 'reading the model' "$BASE_BIN" solve "$json" --format json --output "$WORK/b$n.json") ms;" \
         "writing: $(phase 'writing the results' "$BASE_BIN" solve "$json" --format json --output "$WORK/b$n.json") ms"
    measure "before: solve $n TOML -> JSON file" "$BASE_BIN" solve "$toml" --format json --output "$WORK/b$n.json"
    echo "  before, reading TOML: $(phase 'reading the model' "$BASE_BIN" solve "$toml" --format json --output "$WORK/b$n.json") ms"
  fi
  measure "solve $n JSON -> Parquet directory" "$BIN" solve "$json" --format parquet --output "$WORK/p$n"
  echo "  writing Parquet: $(phase 'writing the results' "$BIN" solve "$json" --format parquet --output "$WORK/p$n") ms;" \
       "results: JSON $(du -k "$WORK/r$n.json" | cut -f1) kB, Parquet $(du -sk "$WORK/p$n" | cut -f1) kB"
  if [ -n "$PEER_PYTHON" ] && { [ "$n" != 1000000 ] || [ "${PEER_MILLION:-0}" = 1 ]; }; then
    measure "peer $n: Python gradient method, scipy + CHOLMOD" "$PEER_PYTHON" benches/peer/gradient_peer.py "$json" "$WORK/peer$n.json"
  fi
done

[ "${SERIES:-1}" = 0 ] && exit 0
# Time series: the 1e4 network over 7 days (and 30 in Parquet), hourly pattern and reports.
base="$WORK/g10000.json"
for days in 7 30; do
  sim="$WORK/sim${days}d.json"
  python3 - "$base" "$sim" "$days" <<'PY'
import json, sys
src, dst, days = sys.argv[1], sys.argv[2], int(sys.argv[3])
m = json.load(open(src))
# An invented residential day, 24 hourly factors averaging 1.0.
f = [0.55, 0.5, 0.48, 0.5, 0.6, 0.85, 1.2, 1.45, 1.4, 1.2, 1.1, 1.05,
     1.05, 1.0, 0.95, 0.95, 1.05, 1.25, 1.4, 1.35, 1.2, 0.95, 0.8, 0.65]
s = sum(f) / 24; f = [round(x / s, 4) for x in f]
out = {}
for k, v in m.items():
    if k == "nodes":
        out["simulation"] = {"duration": f"{days} d", "hydraulic_step": "1 h", "report_interval": "1 h"}
        out["patterns"] = [{"id": "day", "step": "1 h", "multipliers": f}]
        for n in v:
            if n.get("kind", "junction") == "junction":
                n["pattern"] = "day"
    out[k] = v
json.dump(out, open(dst, "w"))
PY
  measure "simulate 1e4 ${days} d: table (summary only)" "$BIN" simulate "$sim"
  if [ "$days" = 7 ]; then
    measure "simulate 1e4 ${days} d: JSON file" "$BIN" simulate "$sim" --format json --output "$WORK/s.json"
    measure "simulate 1e4 ${days} d: CSV file" "$BIN" simulate "$sim" --format csv --output "$WORK/s.csv"
    echo "  files: JSON $(du -m "$WORK/s.json" | cut -f1) MB, CSV $(du -m "$WORK/s.csv" | cut -f1) MB"
  fi
  measure "simulate 1e4 ${days} d: Parquet directory" "$BIN" simulate "$sim" --format parquet --output "$WORK/s$days"
  echo "  Parquet: $(du -sm "$WORK/s$days" | cut -f1) MB"
done
