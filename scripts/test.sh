#!/usr/bin/env bash
# The whole test suite of ringmain: what CI runs, and what to run before every commit.
#
#   scripts/test.sh
#
# Needs: the Rust toolchain (cargo, with clippy and rustfmt) and Python 3.11 with venv and pip.
# The Python reference libraries are installed into .venv/ on the first run.
set -euo pipefail
cd "$(dirname "$0")/.."

step() { printf '\n==> %s\n' "$*"; }

step "format"
cargo fmt --all --check

step "lock files (the fuzz crate's own lock must follow the core's dependencies)"
# Checked here, not only by the fuzzing at the end, so that a stale lock fails in seconds.
if ! cargo metadata --locked --offline --manifest-path fuzz/Cargo.toml --format-version 1 >/dev/null 2>&1 &&
  ! cargo metadata --locked --manifest-path fuzz/Cargo.toml --format-version 1 >/dev/null; then
  echo "fuzz/Cargo.lock is out of date: run scripts/update-fuzz-lock.sh and commit it" >&2
  exit 1
fi

step "lint"
cargo clippy --release --workspace --all-targets -- -D warnings

step "docs"
RUSTDOCFLAGS="-D warnings" cargo doc --no-deps -p ringmain-core -p ringmain-ffi

step "build"
cargo build --release --workspace

step "Rust tests (unit, integration, property, doc)"
cargo test --release --workspace

step "Python reference checks"
if [ ! -x .venv/bin/python ]; then
  python3 -m venv .venv
fi
.venv/bin/python -m pip install --quiet --disable-pip-version-check -r tests/python/requirements.txt
RINGMAIN_BIN="$PWD/target/release/ringmain" .venv/bin/python -m pytest tests/python -q

step "C library and Python package"
scripts/test-embedding.sh

step "the HTML map in headless Chromium"
scripts/test-map-browser.sh

step "fuzz the model reader (60 s of fuzzing; 5–7 min on a fresh machine with the install and build)"
command -v cargo-fuzz >/dev/null 2>&1 || cargo install cargo-fuzz --locked
scripts/test-fuzz.sh

printf '\nall checks passed\n'
