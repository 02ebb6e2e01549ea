#!/bin/sh
# SPDX-License-Identifier: MIT
# The architecture's include rules (docs/architecture.md, "Modules and their
# layers"), read from the #include lines of src/, src/cli/ and
# include/splitlot/. Every module has a layer; a file may include its own
# module's headers and those of modules in lower layers, never a higher or
# sibling one; a private header (src/<m>_internal.h, src/<m>_*.h) only from
# its module (src/<m>.h is a module without a public header); the library never includes the command layer. One line per
# reach-back, then failure; a module without a layer is a warning only.
# Usage: check_includes.sh SOURCE_DIR [-v]   (-v prints the include graph)
set -eu
dir=$1 verbose=${2:-}

# layer of a module; modules of one layer do not include each other
layer() {
    case $1 in
    error | units | text | sha256) echo 0 ;;
    physics | csv | stats | db) echo 1 ;;
    fit | plan | rowsrc) echo 2 ;;
    layout | predict) echo 3 ;;
    simulate) echo 4 ;;
    store) echo 5 ;;
    ingest | analyze) echo 6 ;;
    chart) echo 7 ;;
    report) echo 8 ;;
    cli) echo 9 ;;
    *) echo unknown ;;
    esac
}

# the module a file belongs to: include/splitlot/<m>.h, src/<m>[_*].{c,h}, src/cli/*
module_of() {
    case $1 in
    */src/cli/*) echo cli ;;
    *) basename "$1" | sed 's/[._].*//' ;;
    esac
}

# a module whose private headers another module may include: db is the
# store's own database layer (SQLite and PostgreSQL drivers)
friend() {
    [ "$1" = db ] && [ "$2" = store ]
}

status=0
edges=""
for f in "$dir"/src/*.c "$dir"/src/*.h "$dir"/include/splitlot/*.h "$dir"/src/cli/*.c "$dir"/src/cli/*.h; do
    [ -f "$f" ] || continue
    m=$(module_of "$f")
    lm=$(layer "$m")
    rel=${f#"$dir"/}
    if [ "$lm" = unknown ]; then
        echo "warning: $rel: module '$m' has no layer yet, not checked (give it one here and in docs/architecture.md)" >&2
        continue
    fi
    for inc in $(sed -n 's/^[[:space:]]*#[[:space:]]*include[[:space:]]*"\([^"]*\)".*/\1/p' "$f"); do
        case $inc in
        splitlot/*) t=$(basename "$inc" .h); private=0 ;;
        cli.h | output.h) t=cli; private=0 ;;
        *cli/*) t=cli; private=0 ;;
        */*) t=unknown; private=0 ;;
        *_*) t=$(echo "$inc" | sed 's/_.*//'); private=1 ;;
        *) t=$(basename "$inc" .h); private=0 ;; # src/<m>.h: a library-internal module
        esac
        [ "$m" = cli ] && [ "$t" = cli ] && continue
        lt=$(layer "$t")
        [ "$t" != "$m" ] && edges="$edges$m -> $t
"
        if [ "$lt" = unknown ]; then
            echo "warning: $rel: includes \"$inc\" of module '$t', which has no layer yet" >&2
        elif [ "$private" = 1 ] && [ "$t" != "$m" ] && ! friend "$t" "$m"; then
            echo "error: $rel: includes \"$inc\", a private header of module '$t'" >&2
            status=1
        elif [ "$t" != "$m" ] && [ "$lt" -ge "$lm" ]; then
            echo "error: $rel: module '$m' (layer $lm) includes \"$inc\" of module '$t' (layer $lt): a reach-back" >&2
            status=1
        fi
    done
done
if [ "$verbose" = -v ]; then
    printf '%s' "$edges" | sort -u
fi
[ "$status" = 0 ] && echo "include rules hold: $(printf '%s' "$edges" | sort -u | wc -l) module edges"
exit "$status"
