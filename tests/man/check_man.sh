#!/bin/sh
# SPDX-License-Identifier: MIT
# The man pages against the program, so they cannot drift apart. Modes:
#   render  each built page (build/man/) goes through groff with every warning
#           on, and through man -l, without a word on stderr; skipped (77)
#           when scdoc was missing and no page was built;
#   drift   every command of src/cli/commands.c and every option of the
#           option tables in src/cli/cmd_<name>.c appears in splitlot(1), an
#           option in its command's section of OPTIONS; every
#           key of the plan validator's field tables (src/plan*.c) and every
#           built-in material (src/physics.c) appears in splitlot-plan(5).
# Usage: check_man.sh render MAN_BUILD_DIR | check_man.sh drift SOURCE_DIR
set -eu
mode=$1 dir=$2
status=0

problem() {
    echo "error: $*" >&2
    status=1
}

case $mode in
render)
    found=0
    for page in "$dir"/splitlot.1 "$dir"/splitlot-plan.5 "$dir"/splitlot-data.5; do
        [ -f "$page" ] || continue
        found=$((found + 1))
        warnings=$(groff -man -ww -z -Tutf8 "$page" 2>&1 >/dev/null || echo "groff failed")
        [ -z "$warnings" ] || problem "$(basename "$page"): $warnings"
        if command -v man >/dev/null 2>&1; then
            warnings=$(LC_ALL=C.UTF-8 MANWIDTH=80 man --warnings=w -l "$page" 2>&1 >/dev/null ||
                echo "man -l failed")
            [ -z "$warnings" ] || problem "$(basename "$page") (man -l): $warnings"
        fi
    done
    if [ "$found" = 0 ]; then
        echo "skipped: no man page built in $dir (scdoc missing)"
        exit 77
    fi
    [ "$status" = 0 ] && echo "$found pages render without warnings"
    ;;
drift)
    man1=$dir/man/splitlot.1.scd
    plan5=$dir/man/splitlot-plan.5.scd
    n=0
    for cmd in $(grep -ohE '\{ *"[a-z][a-z-]*", *cmd_' "$dir/src/cli/commands.c" | sed 's/.*"\(.*\)".*/\1/'); do
        n=$((n + 1))
        grep -qE "^\*$cmd\*" "$man1" || problem "command '$cmd' (src/cli/commands.c) is not described in man/splitlot.1.scd"
    done
    # a command's options are documented in its own section of OPTIONS ("## <command>")
    # or in "## Common to the data commands"
    section() {
        awk -v h="## $1" '$0 == h { on = 1; next } /^#/ { on = 0 } on' "$man1"
    }
    common=$(section "Common to the data commands")
    for f in "$dir"/src/cli/cmd_*.c; do
        cmd=$(basename "$f" .c | sed 's/^cmd_//')
        text="$common
$(section "$cmd")"
        for opt in $(grep -ohE '\{ *"[a-zA-Z][-a-zA-Z0-9]*", *(required|no|optional)_argument' "$f" |
                     sed 's/.*"\(.*\)".*/\1/'); do
            n=$((n + 1))
            printf '%s\n' "$text" | grep -qE -- "\*--$opt\*" ||
                problem "option --$opt of '$cmd' ($(basename "$f")) is not in its section of man/splitlot.1.scd (## $cmd)"
        done
    done
    for key in $(grep -ohE '\{ *"[A-Za-z_][A-Za-z0-9_]*", *[01] *\}' "$dir"/src/plan*.c |
                 sed 's/.*"\(.*\)".*/\1/' | sort -u); do
        n=$((n + 1))
        grep -qE "(^|[^A-Za-z0-9_])$key([^A-Za-z0-9_]|$)" "$plan5" ||
            problem "plan key '$key' (src/plan*.c) is not in man/splitlot-plan.5.scd"
    done
    for m in $(grep -ohE '\{ *"[A-Za-z0-9]+", *[0-9.]+, *[0-9.]+ *\}' "$dir/src/physics.c" |
               sed 's/.*"\(.*\)".*/\1/'); do
        n=$((n + 1))
        grep -qE "^\|  $m\$" "$plan5" ||
            problem "material '$m' (src/physics.c) is not in the table of man/splitlot-plan.5.scd"
    done
    [ "$n" -gt 40 ] || problem "only $n names found in the sources: has their layout changed?"
    [ "$status" = 0 ] && echo "$n commands, options, plan keys and materials documented"
    ;;
*)
    problem "unknown mode '$mode'"
    ;;
esac
exit "$status"
