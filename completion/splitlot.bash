# SPDX-License-Identifier: MIT
# bash completion for splitlot: commands, each command's options (read from
# its --help, so they follow the program), lot ids from the database (through
# `splitlot lots --format csv`, honouring --db and SPLITLOT_DB), and file
# names where a file is expected. Installed as
# share/bash-completion/completions/splitlot.

# The words of a `splitlot ... --help` text that are options.
_splitlot_options()
{
    "$1" "$2" --help 2>/dev/null | grep -o -- '--[a-zA-Z][-a-zA-Z0-9]*' | sort -u
}

# The lot ids of the database the command line names (--db), or the default.
_splitlot_lots()
{
    local prog=$1 db="" i
    for ((i = 1; i < ${#COMP_WORDS[@]} - 1; i++)); do
        [[ ${COMP_WORDS[i]} == --db ]] && db=${COMP_WORDS[i + 1]}
        [[ ${COMP_WORDS[i]} == --db=* ]] && db=${COMP_WORDS[i]#--db=}
    done
    "$prog" lots ${db:+--db "$db"} --format csv 2>/dev/null | tail -n +2 | tr -d '\r'
}

_splitlot()
{
    local prog=${COMP_WORDS[0]} cur=${COMP_WORDS[COMP_CWORD]} prev="" cmd=${COMP_WORDS[1]}
    ((COMP_CWORD > 0)) && prev=${COMP_WORDS[COMP_CWORD - 1]}
    COMPREPLY=()
    if ((COMP_CWORD == 1)); then
        local commands
        commands=$("$prog" --help 2>/dev/null | sed -n 's/^  \([a-z][a-z-]*\)  .*/\1/p')
        mapfile -t COMPREPLY < <(compgen -W "$commands --help --version" -- "$cur")
        return 0
    fi
    case $prev in
    --lot)
        mapfile -t COMPREPLY < <(compgen -W "$(_splitlot_lots "$prog")" -- "$cur")
        return 0 ;;
    --format)
        mapfile -t COMPREPLY < <(compgen -W "table csv json" -- "$cur")
        return 0 ;;
    --model)
        mapfile -t COMPREPLY < <(compgen -W "symmetric two-mobility" -- "$cur")
        return 0 ;;
    --density-model)
        mapfile -t COMPREPLY < <(compgen -W "qc short" -- "$cur")
        return 0 ;;
    --db | --results | --sweeps | --rejects)
        compopt -o filenames 2>/dev/null
        mapfile -t COMPREPLY < <(compgen -f -- "$cur")
        return 0 ;;
    --out)
        compopt -o filenames 2>/dev/null
        if [[ $cmd == simulate ]]; then
            mapfile -t COMPREPLY < <(compgen -d -- "$cur")
        else
            mapfile -t COMPREPLY < <(compgen -f -- "$cur")
        fi
        return 0 ;;
    esac
    if [[ $cur == -* ]]; then
        mapfile -t COMPREPLY < <(compgen -W "$(_splitlot_options "$prog" "$cmd")" -- "$cur")
        return 0
    fi
    compopt -o filenames 2>/dev/null
    case $cmd in
    check | layout | predict | simulate)
        # the plan: YAML files and directories to reach them
        mapfile -t COMPREPLY < <(compgen -f -X '!*.@(yaml|yml)' -- "$cur"; compgen -d -- "$cur")
        ;;
    *)
        mapfile -t COMPREPLY < <(compgen -f -- "$cur")
        ;;
    esac
    return 0
}

complete -F _splitlot splitlot
