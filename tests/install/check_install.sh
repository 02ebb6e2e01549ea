#!/bin/sh
# SPDX-License-Identifier: MIT
# The install as a user meets it (docs/install.md). Modes:
#   tree       cmake --install into a fresh prefix under the build folder and
#              check that every promised file is there;
#   pkgconfig  compile floor.c with `pkg-config --cflags --libs splitlot`;
#   cmake      configure and build tests/install/consumer (find_package).
# The last two run the program, which checks the thermal floor at 300 K.
# Usage: check_install.sh MODE BUILD_DIR SOURCE_DIR LIBDIR
set -eu
mode=$1 build=$2 src=$3 libdir=$4
prefix=$build/install-test/prefix

fail() {
    echo "error: $*" >&2
    exit 1
}

case $mode in
tree)
    rm -rf "$build/install-test"
    cmake --install "$build" --prefix "$prefix" >"$build/install-test.log" 2>&1 ||
        { cat "$build/install-test.log"; fail "cmake --install failed"; }
    while read -r f; do
        [ -z "$f" ] && continue
        [ -f "$prefix/$f" ] || fail "not installed: $f"
    done <<LIST
bin/splitlot
$libdir/libsplitlot.a
include/splitlot/physics.h
include/splitlot/units.h
include/splitlot/store.h
$libdir/pkgconfig/splitlot.pc
$libdir/cmake/splitlot/splitlotConfig.cmake
$libdir/cmake/splitlot/splitlotConfigVersion.cmake
$libdir/cmake/splitlot/splitlotTargets.cmake
$libdir/cmake/splitlot/FindLibYAML.cmake
$(cat "$build/install-test-extra.txt" 2>/dev/null || true)
LIST
    [ -x "$prefix/bin/splitlot" ] || fail "bin/splitlot is not executable"
    "$prefix/bin/splitlot" --version | grep -q '^splitlot [0-9]' || fail "installed splitlot --version"
    # the exported include directory is the installed one, never the source tree
    if grep -q "$src" "$prefix/$libdir/cmake/splitlot/"*.cmake "$prefix/$libdir/pkgconfig/splitlot.pc"; then
        fail "the installed package names the source tree $src"
    fi
    echo "installed into $prefix"
    ;;
pkgconfig)
    out=$build/install-test/floor-pkgconfig
    export PKG_CONFIG_PATH="$prefix/$libdir/pkgconfig${PKG_CONFIG_PATH:+:$PKG_CONFIG_PATH}"
    flags=$(pkg-config --cflags --libs splitlot) || fail "pkg-config --cflags --libs splitlot"
    echo "pkg-config: $flags"
    # shellcheck disable=SC2086 # the flags are words
    ${CC:-cc} -std=c11 -Wall -Wextra -Wpedantic -Werror -o "$out" "$src/tests/install/floor.c" $flags ||
        fail "compiling with the pkg-config flags"
    "$out"
    # every installed public header compiles on its own with those flags
    for h in "$prefix"/include/splitlot/*.h; do
        printf '#include <splitlot/%s>\nint main(void) { return 0; }\n' "$(basename "$h")" >"$out-h.c"
        # shellcheck disable=SC2086
        ${CC:-cc} -std=c11 -Wall -Wextra -Wpedantic -Werror -c -o "$out-h.o" "$out-h.c" $flags ||
            fail "installed header $(basename "$h") does not compile on its own"
    done
    ;;
cmake)
    work=$build/install-test/consumer
    rm -rf "$work"
    cmake -S "$src/tests/install/consumer" -B "$work" -DCMAKE_PREFIX_PATH="$prefix" \
        >"$work.log" 2>&1 || { cat "$work.log"; fail "configuring the consumer project"; }
    cmake --build "$work" >>"$work.log" 2>&1 || { cat "$work.log"; fail "building the consumer project"; }
    "$work/floor"
    ;;
*)
    fail "unknown mode '$mode'"
    ;;
esac
