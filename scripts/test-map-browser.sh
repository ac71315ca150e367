#!/usr/bin/env bash
# The HTML map of `ringmain map` in a real browser: Debian's headless Chromium, driven by
# playwright-core (tests/browser/map-check.mjs). Installs Chromium (apt) and playwright-core (npm,
# pinned in tests/browser/package.json) when missing. Called by scripts/test.sh; about a minute
# with the installs.
#
#   scripts/test-map-browser.sh            # needs target/release/ringmain
#   RINGMAIN_MAP_TIMING=1 RINGMAIN_MAP_JUNCTIONS=50000 scripts/test-map-browser.sh   # redraw time
set -euo pipefail
cd "$(dirname "$0")/.."
BIN="${RINGMAIN_BIN:-$PWD/target/release/ringmain}"

if [ ! -x /usr/bin/chromium ]; then
  echo "installing chromium (Debian package)"
  export DEBIAN_FRONTEND=noninteractive
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
  $SUDO apt-get update -qq
  $SUDO apt-get install -y -qq chromium >/dev/null
fi
if ! command -v node >/dev/null 2>&1; then
  echo "installing nodejs and npm (Debian packages)"
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq nodejs npm >/dev/null
fi
WORK="$PWD/target/browser-test"
mkdir -p "$WORK"
cp tests/browser/package.json tests/browser/map-check.mjs "$WORK/"
if [ ! -d "$WORK/node_modules/playwright-core" ]; then
  (cd "$WORK" && npm install --silent --no-audit --no-fund >/dev/null)
fi

# An invented street network (ringmain generate), solved and drawn by velocity: the tooltip of its
# first pipe must give the velocity with its unit.
N="${RINGMAIN_MAP_JUNCTIONS:-600}"
"$BIN" generate --junctions "$N" --seed 7 --output "$WORK/town.json"
"$BIN" map "$WORK/town.json" --quantity velocity --output "$WORK/town.html"
FIRST_LINK=$(python3 -c 'import json,sys; print(json.load(open(sys.argv[1]))["links"][0]["id"])' "$WORK/town.json")
(cd "$WORK" && node map-check.mjs town.html "$FIRST_LINK" "velocity:" town.png)
# A node quantity: the tooltip of the source gives its pressure.
"$BIN" map "$WORK/town.json" --quantity head --output "$WORK/town-head.html"
FIRST_NODE=$(python3 -c 'import json,sys; print(json.load(open(sys.argv[1]))["nodes"][-1]["id"])' "$WORK/town.json")
(cd "$WORK" && node map-check.mjs town-head.html "$FIRST_NODE" "head:" town-head.png)
