#!/usr/bin/env bash
# Copies the example models and the test networks into the fuzz corpus folder (which is not
# committed: libFuzzer adds to it as it runs).
#
#   scripts/fuzz-seed.sh            # fills fuzz/corpus/read_model/
set -euo pipefail
cd "$(dirname "$0")/.."
corpus=fuzz/corpus/read_model
mkdir -p "$corpus"
count=0
while IFS= read -r -d '' file; do
  # Flatten the path into a file name, keeping it unique.
  cp "$file" "$corpus/seed-$(echo "${file#./}" | tr '/' '_')"
  count=$((count + 1))
done < <(find examples tests/data -type f \( -name '*.toml' -o -name '*.json' \) -print0 2>/dev/null)
echo "seeded $count files into $corpus"
