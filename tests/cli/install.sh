#!/usr/bin/env bash
# End-to-end: `cmake --install` gives the binary, the headers and collshift.pc, and another C
# program links the library through pkg-config.
. "$(dirname "$0")/lib.bash"
: "${CS_BUILD_DIR:?}"
cc=${CS_CC:-cc}
extra=()
[ "${CS_SANITIZE:-OFF}" = ON ] && extra=(-fsanitize=address,undefined)
expect_code 0 cmake --install "$CS_BUILD_DIR" --prefix "$TMP/prefix"
[ -x "$TMP/prefix/bin/collshift" ] && ok || bad "binary not installed"
[ -f "$TMP/prefix/include/collshift/io.h" ] && ok || bad "headers not installed"
[ -f "$TMP/prefix/share/man/man1/collshift.1" ] && ok || bad "manual page not installed"
[ -f "$TMP/prefix/share/collshift/spectra/README.md" ] && ok || bad "demo data not installed"
pc=$(find "$TMP/prefix" -name collshift.pc | head -1)
[ -n "$pc" ] && ok || bad "collshift.pc not installed"
export PKG_CONFIG_PATH="$(dirname "$pc")"
expect_code 0 "$cc" "${extra[@]}" -std=c11 -o "$TMP/describe" "$CS_SOURCE_DIR/examples/c-api/describe.c" \
  $(pkg-config --cflags --libs collshift) -Wl,-rpath,"$TMP/prefix/lib" -Wl,-rpath,"$(pkg-config --variable=libdir collshift)"
expect_code 0 "$TMP/describe" "$CS_SOURCE_DIR/spectra/synthetic_broad_narrow_spectrum.csv"
expect_in "$TMP/out" "spectrum 1201 points"
expect_code 0 "$TMP/prefix/bin/collshift" --version
finish
