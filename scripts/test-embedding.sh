#!/usr/bin/env bash
# Tests of ringmain's embedding interfaces: the generated C header, the C tests (plainly and under
# Valgrind memcheck) and the Python package. Run after the workspace release build; scripts/test.sh
# calls it.
#
#   scripts/test-embedding.sh
#
# Needs: cargo, gcc, make, valgrind, cmake, pkg-config (installed with apt-get when missing),
# Python 3 with venv.
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
for tool in gcc make valgrind cmake pkg-config; do
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

step "installed C library: scripts/install-lib.sh, then a program built with pkg-config and with CMake"
PREFIX_DIR="$C_TMP/prefix"
scripts/install-lib.sh "$PREFIX_DIR"
SONAME=$(readelf -d "$RELEASE/libringmain.so" | sed -n 's/.*Library soname: \[\(.*\)\].*/\1/p')
[ -L "$PREFIX_DIR/lib/$SONAME" ] || die "install-lib.sh did not make the link $SONAME"
PKG_CONFIG_PATH="$PREFIX_DIR/lib/pkgconfig" cc -std=c11 -Wall -Wextra -Werror -pedantic \
  bindings/c/test_double_include.c $(PKG_CONFIG_PATH="$PREFIX_DIR/lib/pkgconfig" pkg-config --cflags --libs ringmain) \
  -Wl,-rpath,"$PREFIX_DIR/lib" -o "$C_TMP/pkgconfig_app"
"$C_TMP/pkgconfig_app"
readelf -d "$C_TMP/pkgconfig_app" | grep -q "Shared library: \[$SONAME\]" \
  || die "a program linked with -lringmain does not record the SONAME $SONAME"
mkdir -p "$C_TMP/cmake_app"
cp bindings/c/test_double_include.c "$C_TMP/cmake_app/app.c"
cat >"$C_TMP/cmake_app/CMakeLists.txt" <<'CMAKE'
cmake_minimum_required(VERSION 3.13)
project(ringmain_cmake_check C)
find_package(ringmain 0.1 REQUIRED)
add_executable(app app.c)
target_link_libraries(app PRIVATE ringmain::ringmain)
add_executable(app_static app.c)
target_link_libraries(app_static PRIVATE ringmain::ringmain_static)
CMAKE
cmake -S "$C_TMP/cmake_app" -B "$C_TMP/cmake_app/build" -DCMAKE_PREFIX_PATH="$PREFIX_DIR" \
  -DCMAKE_BUILD_RPATH="$PREFIX_DIR/lib" >/dev/null
cmake --build "$C_TMP/cmake_app/build" >/dev/null
"$C_TMP/cmake_app/build/app"
"$C_TMP/cmake_app/build/app_static"

step "Python package: pip install builds the library into the package; tests, doctests, mypy --strict"
if [ ! -x .venv/bin/python ]; then
  python3 -m venv .venv
fi
.venv/bin/python -m pip install --quiet --disable-pip-version-check -r tests/python/requirements.txt
.venv/bin/python -m pip install --quiet --disable-pip-version-check --force-reinstall --no-deps ./bindings/python
# The tests use the installed package and the library inside it (test_build.py checks that).
(cd bindings/python && RINGMAIN_BIN="$RELEASE/ringmain" ../../.venv/bin/python -m pytest tests -q -p no:cacheprovider)
(ROOT_DIR=$PWD; cd "$C_TMP" && "$ROOT_DIR/.venv/bin/python" -m pytest --doctest-modules --pyargs ringmain -q -p no:cacheprovider)
(cd bindings/python && ../../.venv/bin/python -m mypy --strict --no-incremental -p ringmain)
