# bash completion for gloam. The commands and each command's options are read
# from the program's own --help output when asked for, so the completion
# never lists an option the installed gloam does not take. Installed as
# share/bash-completion/completions/gloam.

_gloam_words() { # the --options (or, with no command, the commands) of gloam's help
    local prog=$1 cmd=$2
    if [ -z "$cmd" ]; then
        "$prog" --help 2>/dev/null | sed -n '/^commands:/,/^$/s/^  \([a-z][a-z-]*\) .*/\1/p'
    else
        "$prog" "$cmd" --help 2>/dev/null | grep -o -- '--[a-z][a-z0-9-]*' | sort -u
    fi
}

_gloam() {
    local cur prev cmd
    COMPREPLY=()
    cur=${COMP_WORDS[COMP_CWORD]}
    prev=${COMP_WORDS[COMP_CWORD - 1]}
    if [ "$COMP_CWORD" -le 1 ]; then # the command always comes first
        COMPREPLY=($(compgen -W "$(_gloam_words "${COMP_WORDS[0]}" '') --help --version" -- "$cur"))
        return
    fi
    cmd=${COMP_WORDS[1]}
    case $cur in
    -*)
        COMPREPLY=($(compgen -W "$(_gloam_words "${COMP_WORDS[0]}" "$cmd")" -- "$cur"))
        return
        ;;
    esac
    case $prev in
    --threads | --frames | --size | --seed | --modes | --plane | --threshold | --fwhm | \
        --mask-radius | --psf-scale | --north-offset | --companion | --pixscale)
        return # a number: nothing to offer
        ;;
    esac
    # files: FITS cubes, angle lists and tables first, any file when none match
    COMPREPLY=($(compgen -f -X '!*.@(fits|fit|fts|fits.gz|txt|csv|ini)' -- "$cur") $(compgen -d -- "$cur"))
    [ ${#COMPREPLY[@]} -eq 0 ] && COMPREPLY=($(compgen -f -- "$cur"))
}
complete -o filenames -F _gloam gloam
