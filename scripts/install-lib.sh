#!/usr/bin/env bash
# Installs the ringmain C library into a prefix: the header, the shared library under its full
# version with the SONAME and development links, the static library, the pkg-config file and the
# CMake package configuration.
#
#   scripts/install-lib.sh PREFIX        (after `cargo build --release`)
#
#   PREFIX/include/ringmain.h
#   PREFIX/lib/libringmain.so.X.Y.Z, libringmain.so.SONAME-VERSION -> it, libringmain.so -> it
#   PREFIX/lib/libringmain.a
#   PREFIX/lib/pkgconfig/ringmain.pc
#   PREFIX/lib/cmake/ringmain/ringmainConfig.cmake, ringmainConfigVersion.cmake
#
# Honours CARGO_TARGET_DIR. Run ldconfig afterwards when PREFIX is a system prefix.
set -euo pipefail
cd "$(dirname "$0")/.."
[ $# -eq 1 ] || { echo "usage: $0 PREFIX" >&2; exit 2; }
PREFIX=$1
case "$PREFIX" in /*) ;; *) PREFIX="$PWD/$PREFIX" ;; esac
TARGET_DIR="${CARGO_TARGET_DIR:-target}"
RELEASE="$TARGET_DIR/release"
for f in libringmain.so libringmain.a; do
  [ -f "$RELEASE/$f" ] || { echo "error: no $RELEASE/$f; run cargo build --release first" >&2; exit 1; }
done
VERSION=$(sed -n 's/^#define RINGMAIN_VERSION "\(.*\)"$/\1/p' ffi/include/ringmain.h)
SONAME=$(readelf -d "$RELEASE/libringmain.so" | sed -n 's/.*Library soname: \[\(.*\)\].*/\1/p')
[ -n "$VERSION" ] && [ -n "$SONAME" ] || { echo "error: cannot read the version or the SONAME" >&2; exit 1; }

install -Dm644 ffi/include/ringmain.h "$PREFIX/include/ringmain.h"
install -Dm755 "$RELEASE/libringmain.so" "$PREFIX/lib/libringmain.so.$VERSION"
ln -sfn "libringmain.so.$VERSION" "$PREFIX/lib/$SONAME"
ln -sfn "$SONAME" "$PREFIX/lib/libringmain.so"
install -Dm644 "$RELEASE/libringmain.a" "$PREFIX/lib/libringmain.a"
mkdir -p "$PREFIX/lib/pkgconfig" "$PREFIX/lib/cmake/ringmain"
sed -e "s|@PREFIX@|$PREFIX|" -e "s|@VERSION@|$VERSION|" ffi/ringmain.pc.in >"$PREFIX/lib/pkgconfig/ringmain.pc"
for f in ringmainConfig ringmainConfigVersion; do
  sed -e "s|@VERSION@|$VERSION|" -e "s|@SONAME@|$SONAME|" "ffi/cmake/$f.cmake.in" >"$PREFIX/lib/cmake/ringmain/$f.cmake"
done
echo "installed ringmain $VERSION ($SONAME) into $PREFIX"
