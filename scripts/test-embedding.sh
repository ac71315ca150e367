#!/usr/bin/env bash
# Tests of ringmain's embedding interfaces: the generated C header, the C tests (plainly and under
# Valgrind memcheck) and the Python package. Run after the workspace release build; scripts/test.sh
# calls it.
#
#   scripts/test-embedding.sh
#
# Needs: cargo, gcc, make, valgrind (installed with apt-get when missing), Python 3 with venv.
# Honours CARGO_TARGET_DIR. Installs the pinned cbindgen with `cargo install` when it is missing.
set -euo pipefail
cd "$(dirname "$0")/.."

# The cbindgen version the committed header is generated with. Change it only together with a
# regenerated ffi/include/ringmain.h.
CBINDGEN_VERSION=0.29.4

step() { printf '\n==> %s\n' "$*"; }
die() { printf 'error: %s\n' "$*" >&2; exit 1; }

TARGET_DIR="${CARGO_TARGET_DIR:-target}"
case "$TARGET_DIR" in /*) ;; *) TARGET_DIR="$PWD/$TARGET_DIR" ;; esac
export CARGO_TARGET_DIR="$TARGET_DIR"
RELEASE="$TARGET_DIR/release"

step "release build of the library and the program (nothing to do when they are up to date)"
cargo build --release --workspace
[ -f "$RELEASE/libringmain.so" ] || die "no $RELEASE/libringmain.so after the build"
[ -x "$RELEASE/ringmain" ] || die "no $RELEASE/ringmain after the build"

step "C header: regenerate with cbindgen $CBINDGEN_VERSION and compare with the committed one"
if ! command -v cbindgen >/dev/null || [ "$(cbindgen --version)" != "cbindgen $CBINDGEN_VERSION" ]; then
  cargo install cbindgen --version "$CBINDGEN_VERSION" --locked
fi
[ "$(cbindgen --version)" = "cbindgen $CBINDGEN_VERSION" ] \
  || die "cbindgen on PATH is '$(cbindgen --version)', expected $CBINDGEN_VERSION (is ~/.cargo/bin first on PATH?)"
cbindgen --quiet --config ffi/cbindgen.toml --crate ringmain-ffi --output ffi/include/ringmain.h
git ls-files --error-unmatch ffi/include/ringmain.h >/dev/null \
  || die "ffi/include/ringmain.h is not committed"
if ! git diff --exit-code -- ffi/include/ringmain.h; then
  die "ffi/include/ringmain.h differs from what cbindgen generates from ffi/src; commit the regenerated header"
fi

step "C tests"
for tool in gcc make valgrind; do
  if ! command -v "$tool" >/dev/null; then
    command -v apt-get >/dev/null || die "$tool is missing and apt-get is not available to install it"
    apt-get install -y --no-install-recommends "$tool" >/dev/null || {
      apt-get update >/dev/null && apt-get install -y --no-install-recommends "$tool" >/dev/null
    } || die "could not install $tool"
  fi
done
C_TMP="$(mktemp -d)"
trap 'rm -rf "$C_TMP"' EXIT
C_TESTS=$(make -s -C bindings/c list)
C_COUNT=$(wc -w <<<"$C_TESTS")
make -s -C bindings/c LIBDIR="$RELEASE" TMPDIR="$C_TMP" check
printf 'C: %d passed, 0 failed\n' "$C_COUNT"

step "C tests under Valgrind memcheck"
make -s -C bindings/c LIBDIR="$RELEASE" TMPDIR="$C_TMP" valgrind
printf 'valgrind: %d passed, 0 failed\n' "$C_COUNT"

step "Python package"
if [ ! -x .venv/bin/python ]; then
  python3 -m venv .venv
fi
.venv/bin/python -m pip install --quiet --disable-pip-version-check -r tests/python/requirements.txt
.venv/bin/python -m pip install --quiet --disable-pip-version-check --force-reinstall --no-deps ./bindings/python
# The installed package finds the library in this workspace's release directory by itself.
(cd bindings/python && RINGMAIN_BIN="$RELEASE/ringmain" ../../.venv/bin/python -m pytest tests -q -p no:cacheprovider)
