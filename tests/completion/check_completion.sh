#!/bin/sh
# SPDX-License-Identifier: MIT
# The shell completion (completion/) loads in bash and zsh without a word on
# stderr and completes what the program has: every command of `splitlot
# --help`, a command's options, the formats, and the lot ids of a database.
# zsh's completion function runs against stand-ins of compadd, _describe and
# _files that print what they are given, and once in a real interactive zsh
# (zpty) that completes "splitlot comp<TAB>". Without zsh the zsh half is skipped
# (exit 77) unless SL_REQUIRE_ZSH=1.
# Usage: check_completion.sh SPLITLOT SOURCE_DIR
set -eu
prog=$(cd "$(dirname "$1")" && pwd)/$(basename "$1")
src=$(cd "$2" && pwd)
work=$(mktemp -d "${TMPDIR:-/tmp}/splitlot-completion-XXXXXX")
trap 'rm -rf "$work"' EXIT INT TERM

fail() {
    echo "error: $*" >&2
    exit 1
}

# a database with one lot, for lot completion
(cd "$work" && "$prog" predict "$src/plans/demo.yaml" --db lots.db >/dev/null 2>&1) ||
    fail "could not make the test database"
"$prog" --help | sed -n 's/^  \([a-z][a-z-]*\)  .*/\1/p' | sort >"$work/commands"
[ -s "$work/commands" ] || fail "no commands in splitlot --help"

# has FILE every line of WANT (both sorted)
expect_all() {
    sort -u "$1" >"$1.sorted"
    missing=$(comm -13 "$1.sorted" "$2")
    [ -z "$missing" ] || fail "$3: not completed: $(echo "$missing" | tr '\n' ' ')"
}

# ---- bash ----
complete_bash() { # words... (the last is the word being completed)
    bash --norc --noprofile -c '
        source "$1/completion/splitlot.bash" || exit 1
        shift
        COMP_WORDS=("$@"); COMP_CWORD=$(($# - 1))
        _splitlot
        printf "%s\n" "${COMPREPLY[@]}"' sh "$src" "$@" 2>"$work/bash.err"
    [ ! -s "$work/bash.err" ] || fail "bash: $(cat "$work/bash.err")"
}
complete_bash "$prog" "" >"$work/b1"
expect_all "$work/b1" "$work/commands" "bash, commands"
complete_bash "$prog" co >"$work/b2"
printf 'compare\n' >"$work/want"
expect_all "$work/b2" "$work/want" "bash, co"
complete_bash "$prog" compare --f >"$work/b3"
printf -- '--fail-on-flags\n--format\n' >"$work/want"
expect_all "$work/b3" "$work/want" "bash, compare --f"
complete_bash "$prog" compare --db "$work/lots.db" --lot "" >"$work/b4"
printf 'DEMO-01\n' >"$work/want"
expect_all "$work/b4" "$work/want" "bash, --lot"
complete_bash "$prog" lots --format "" >"$work/b5"
printf 'csv\njson\ntable\n' >"$work/want"
expect_all "$work/b5" "$work/want" "bash, --format"
echo "bash: commands, options, lots and formats complete"

# ---- zsh ----
if ! command -v zsh >/dev/null 2>&1; then
    [ "${SL_REQUIRE_ZSH:-}" = 1 ] && fail "zsh not found (.ci/install-deps test installs it)"
    echo "skipped: zsh not found"
    exit 77
fi
# loads as compinit loads it, without a word on stderr
zsh -f -c '
    autoload -Uz compinit && compinit -u -d "$2/zcompdump"
    fpath=("$1/completion" $fpath)
    autoload -Uz _splitlot && compdef _splitlot splitlot
    [[ $_comps[splitlot] == _splitlot ]] || { print "not registered"; exit 1 }' \
    sh "$src" "$work" >"$work/zsh.load" 2>&1 || fail "zsh: $(cat "$work/zsh.load")"
[ ! -s "$work/zsh.load" ] || fail "zsh: $(cat "$work/zsh.load")"

complete_zsh() { # words... (the last is the word being completed)
    zsh -f -c '
        _call_program() { shift; eval "$*" }
        compadd() { if [[ $1 == -a ]]; then print -rl -- ${(P)2}; else print -rl -- "$@"; fi }
        _describe() { local n; for n in ${(P)4}; do print -r -- ${n%%:*}; done }
        _files() { print -r -- "_files $*" }
        src=$1; shift
        words=("$@"); CURRENT=$#; PREFIX=${words[CURRENT]}
        source "$src/completion/_splitlot"' sh "$src" "$@" 2>"$work/zsh.err"
    [ ! -s "$work/zsh.err" ] || fail "zsh: $(cat "$work/zsh.err")"
}
complete_zsh "$prog" "" >"$work/z1"
expect_all "$work/z1" "$work/commands" "zsh, commands"
complete_zsh "$prog" compare --f >"$work/z3"
printf -- '--fail-on-flags\n--format\n' >"$work/want"
expect_all "$work/z3" "$work/want" "zsh, compare --f"
complete_zsh "$prog" compare --db "$work/lots.db" --lot "" >"$work/z4"
printf 'DEMO-01\n' >"$work/want"
expect_all "$work/z4" "$work/want" "zsh, --lot"
complete_zsh "$prog" check "" >"$work/z5"
grep -q '^_files -g' "$work/z5" || fail "zsh: check does not complete plan files"

# and in a real interactive zsh (zpty), as a user types: "splitlot comp<TAB>"
mkdir -p "$work/bin"
ln -s "$prog" "$work/bin/splitlot"
cat >"$work/interactive.zsh" <<'ZSH'
zmodload zsh/zpty || exit 1
zpty z zsh -f -i
zpty -w z "PS1='> '; fpath=($1/completion \$fpath); path=($2/bin \$path); autoload -Uz compinit; compinit -u -D; print READY"
zpty -r z line '*READY*'
zpty -w -n z $'splitlot comp\t'
out=""
for i in {1..100}; do # up to 20 s on a busy machine
    while zpty -r -t z chunk; do out+=$chunk; done
    [[ $out == *"splitlot compare"* ]] && break
    sleep 0.2
done
zpty -d z
print -r -- "$out"
ZSH
timeout 30 zsh -f "$work/interactive.zsh" "$src" "$work" >"$work/zsh.tty" 2>&1 ||
    fail "zsh: the interactive session did not finish: $(cat "$work/zsh.tty")"
grep -q 'splitlot compare' "$work/zsh.tty" ||
    fail "zsh: 'splitlot comp<TAB>' did not become 'splitlot compare': $(cat "$work/zsh.tty")"
echo "zsh: commands, options, lots and plan files complete (also interactively)"
