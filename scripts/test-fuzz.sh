#!/usr/bin/env bash
# Builds the fuzz target of the model reader and runs it for about a minute; fails on any crash.
#
#   scripts/test-fuzz.sh              # 60 s
#   FUZZ_SECONDS=300 scripts/test-fuzz.sh
#
# Needs cargo-fuzz (cargo install cargo-fuzz --locked). cargo-fuzz passes unstable compiler flags
# (the address sanitizer, coverage instrumentation); on a stable toolchain RUSTC_BOOTSTRAP=1
# lets it do so. A crash leaves its input in fuzz/artifacts/read_model/ and the message of the
# panic above; reproduce it with `cargo fuzz run read_model fuzz/artifacts/read_model/<file>`.
set -euo pipefail
cd "$(dirname "$0")/.."

seconds="${FUZZ_SECONDS:-60}"
if ! command -v cargo-fuzz >/dev/null 2>&1; then
  echo "cargo-fuzz is not installed: cargo install cargo-fuzz --locked" >&2
  exit 1
fi
export RUSTC_BOOTSTRAP=1

scripts/fuzz-seed.sh
cd fuzz
cargo fuzz build read_model
mkdir -p artifacts/read_model
# -max_len: large enough for the seed models; -rss_limit_mb: the machine's memory is shared.
cargo fuzz run read_model corpus/read_model -- \
  -max_total_time="$seconds" -max_len=65536 -rss_limit_mb=2048 -print_final_stats=1
echo "fuzzing the model reader for ${seconds} s found no crash"
