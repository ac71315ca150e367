#!/usr/bin/env bash
# Brings fuzz/Cargo.lock up to date with the workspace: starts from the workspace's lock file, so
# the fuzz crate builds the core with the very versions the workspace tests, then lets cargo add
# what only the fuzz crate uses (libfuzzer-sys) and drop what it does not.
#
#   scripts/update-fuzz-lock.sh && git add fuzz/Cargo.lock
set -euo pipefail
cd "$(dirname "$0")/.."
cp Cargo.lock fuzz/Cargo.lock
cargo metadata --manifest-path fuzz/Cargo.toml --format-version 1 >/dev/null
cargo metadata --locked --manifest-path fuzz/Cargo.toml --format-version 1 >/dev/null
echo "fuzz/Cargo.lock is up to date"
