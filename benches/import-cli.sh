#!/usr/bin/env bash
# The whole `ringmain import` of 100,000 pipes (reading the GeoJSON, snapping, splitting, writing
# the model and the report), timed by /usr/bin/time. The network is `ringmain generate`'s invented
# town (seed 1), written as GeoJSON by benches/geojson_of_model.py: every pipe a LineString with an
# interior vertex, every node a point. Figures go to benches/RESULTS.md ("Import from GIS").
# --snap 0.01: the generated town has a few junctions closer than 0.5 m, which the default snap
# would (rightly) refuse as two points on one pipe end.
#
#   cargo build --release && benches/import-cli.sh [MIN_PIPE_COUNT]
set -euo pipefail
cd "$(dirname "$0")/.."
PIPES="${1:-100000}"
BIN="${RINGMAIN_BIN:-$PWD/target/release/ringmain}"
WORK="$PWD/target/bench-import"
mkdir -p "$WORK"
# About 1.2 links per junction in generated networks.
JUNCTIONS=$(( PIPES * 5 / 6 + 2000 ))
"$BIN" generate --junctions "$JUNCTIONS" --seed 1 --output "$WORK/town.json"
python3 benches/geojson_of_model.py "$WORK/town.json" "$PIPES" "$WORK"
# The reference of the same run: only parsing the two files with Python's json module (C parser).
/usr/bin/time -f "reference, python3 json.load of both files: %e s wall, %U s user, %S s system, %M KiB peak" \
  python3 -c 'import json,sys; [json.load(open(f)) for f in sys.argv[1:]]' "$WORK/pipes.geojson" "$WORK/points.geojson"
for run in 1 2 3; do
  /usr/bin/time -f "run $run: %e s wall, %U s user, %S s system, %M KiB peak" \
    "$BIN" import --pipes "$WORK/pipes.geojson" --points "$WORK/points.geojson" --fields "$WORK/fields.toml" \
    --snap 0.01 --output "$WORK/imported.json" --report "$WORK/report.json" 2>&1 | grep -E "^(run|import:)"
done
