#!/usr/bin/env bash
# Builds the fuzz target of the model reader and runs it for about a minute; fails on any crash.
# On a fresh machine the whole step takes about 5–7 minutes: installing cargo-fuzz (test.sh does
# it, 2–3 min), building the instrumented crate (about 3 min) and fuzzing (60 s). libFuzzer's own
# log goes to target/fuzz-read_model.log (its last lines are printed), so the test log stays short.
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

# The fuzz crate has its own lock file; it must match its manifest (and so the core's
# dependencies). scripts/update-fuzz-lock.sh brings it up to date from the workspace's lock.
if ! cargo metadata --locked --offline --manifest-path fuzz/Cargo.toml --format-version 1 >/dev/null 2>&1 &&
  ! cargo metadata --locked --manifest-path fuzz/Cargo.toml --format-version 1 >/dev/null 2>&1; then
  echo "fuzz/Cargo.lock is out of date: run scripts/update-fuzz-lock.sh and commit it" >&2
  exit 1
fi

scripts/fuzz-seed.sh
log="$PWD/target/fuzz-read_model.log"
mkdir -p target
cd fuzz
cargo fuzz build read_model
mkdir -p artifacts/read_model
# -max_len: large enough for the seed models; -rss_limit_mb: the machine's memory is shared.
if ! cargo fuzz run read_model corpus/read_model -- \
  -max_total_time="$seconds" -max_len=65536 -rss_limit_mb=2048 -print_final_stats=1 >"$log" 2>&1; then
  tail -n 60 "$log" >&2
  echo "the fuzzer found a crash; the whole log is in $log" >&2
  exit 1
fi
tail -n 12 "$log"
echo "fuzzing the model reader for ${seconds} s found no crash (log: $log)"
