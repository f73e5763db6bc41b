# lib.sh - shared helpers for the CLI bad-input test scripts (sourced, not run).
#
# A script does:
#     . "$(dirname "$0")/lib.sh"
#     sl_setup "$@"                    # SLUICE_BINARY WORKDIR SOURCE_DIR
#     expect NAME --code 65 --err "state 3" --gone "$W/m.h5" -- "$SLUICE" build ...
#     ...
#     sl_finish                        # prints "N passed, M failed", exits 0/1
#
# expect options (all repeatable except --code and --bug):
#   --code N      the exact exit status required ("65|74": either of them)
#   --err WORD    stderr must contain WORD (fixed string, case-sensitive)
#   --not WORD    stderr must not contain WORD
#   --out WORD    stdout must contain WORD
#   --gone PATH   PATH is removed before the run and must not exist after it;
#                 neither may a temporary of it (.BASE.*.partial, BASE.*.tmp,
#                 BASE.partial) in its directory
#   --keep PATH   PATH exists before the run and must be byte-identical after it
#   --clean PATH  no temporary of PATH may be left (PATH itself may exist)
#   --bug TEXT    the case is a known defect in code this suite does not own:
#                 it still fails until fixed, and the line says so; once the
#                 case passes it fails with "stale marker" until --bug is removed
# Every case also fails if the command was killed by a signal (status >= 128)
# or printed "Segmentation" / "core dumped" / "Aborted".

SL_PASS=0
SL_FAIL=0

sl_setup() {
    if [ $# -lt 3 ]; then
        echo "usage: bash $0 SLUICE_BINARY WORKDIR SOURCE_DIR" >&2
        exit 64
    fi
    SLUICE=$1
    W=$2
    SRC=$3
    case $SLUICE in /*) ;; *) SLUICE=$PWD/$SLUICE ;; esac
    case $SRC in /*) ;; *) SRC=$PWD/$SRC ;; esac
    if [ ! -x "$SLUICE" ]; then
        echo "not ok - sluice binary $SLUICE is not executable"
        echo "0 passed, 1 failed"
        exit 1
    fi
    DATA=$SRC/tests/data
    rm -rf "$W" && mkdir -p "$W" || exit 1
    case $W in /*) ;; *) W=$PWD/$W ;; esac
    export SLUICE_CACHE=${SLUICE_CACHE:-$W/cache}
    PY=${SLUICE_PYTHON:-python3}
    if ! "$PY" -c 'import h5py, numpy' 2>/dev/null; then
        # a required prerequisite (README, tools/setup): missing is a failure
        echo "not ok - prerequisite: $PY cannot import h5py and numpy (Debian: python3-h5py python3-numpy; or set SLUICE_PYTHON)"
        echo "0 passed, 1 failed"
        exit 1
    fi
    # a walltime inherited from a calling batch job would stop solves early (75)
    unset SLUICE_WALLTIME SLURM_JOB_END_TIME
}

# _sl_leftovers PATH: print temporaries of PATH left in its directory
_sl_leftovers() {
    local dir base f
    dir=$(dirname "$1")
    base=$(basename "$1")
    [ -d "$dir" ] || return 0
    for f in "$dir/.$base."*.partial "$dir/$base."*.tmp "$dir/$base.partial" "$dir/.$base.partial"; do
        [ -e "$f" ] && echo "$f"
    done
    return 0
}

expect() {
    local name=$1
    shift
    local code="" bug="" errs=() nots=() outs=() gones=() keeps=() cleans=() sums=()
    while [ $# -gt 0 ]; do
        case $1 in
            --code) code=$2; shift 2 ;;
            --err) errs+=("$2"); shift 2 ;;
            --not) nots+=("$2"); shift 2 ;;
            --out) outs+=("$2"); shift 2 ;;
            --gone) gones+=("$2"); shift 2 ;;
            --keep) keeps+=("$2"); shift 2 ;;
            --clean) cleans+=("$2"); shift 2 ;;
            --bug) bug=$2; shift 2 ;;
            --) shift; break ;;
            *) echo "expect: unknown option $1" >&2; exit 70 ;;
        esac
    done
    [ -n "$code" ] || { echo "expect: $name: --code missing" >&2; exit 70; }
    local p k
    for p in "${gones[@]}"; do rm -rf "$p"; done
    for p in "${keeps[@]}"; do
        if [ ! -f "$p" ]; then
            echo "expect: $name: --keep file $p does not exist before the run" >&2
            exit 70
        fi
        sums+=("$(cksum <"$p")")
    done
    local so=$W/.last.stdout se=$W/.last.stderr rc
    "$@" >"$so" 2>"$se" </dev/null
    rc=$?
    local why=()
    case "|$code|" in *"|$rc|"*) ;; *) why+=("exit $rc, expected $code") ;; esac
    [ "$rc" -lt 128 ] || why+=("killed by signal $((rc - 128))")
    for k in Segmentation "core dumped" Aborted; do
        grep -qF -- "$k" "$se" "$so" && why+=("output mentions '$k'")
    done
    for k in "${errs[@]}"; do grep -qF -- "$k" "$se" || why+=("stderr lacks '$k'"); done
    for k in "${nots[@]}"; do grep -qF -- "$k" "$se" && why+=("stderr has '$k'"); done
    for k in "${outs[@]}"; do grep -qF -- "$k" "$so" || why+=("stdout lacks '$k'"); done
    for p in "${gones[@]}"; do
        [ -e "$p" ] && why+=("$(basename "$p") exists afterwards")
        for k in $(_sl_leftovers "$p"); do why+=("temporary $(basename "$k") left behind"); done
    done
    for p in "${cleans[@]}"; do
        for k in $(_sl_leftovers "$p"); do why+=("temporary $(basename "$k") left behind"); done
    done
    local i=0
    for p in "${keeps[@]}"; do
        if [ ! -f "$p" ]; then
            why+=("$(basename "$p") was removed")
        elif [ "$(cksum <"$p")" != "${sums[$i]}" ]; then
            why+=("$(basename "$p") was changed")
        fi
        for k in $(_sl_leftovers "$p"); do why+=("temporary $(basename "$k") left behind"); done
        i=$((i + 1))
    done
    # a case marked as a known defect that passes has a stale marker: it fails
    # until the marker is removed, so fixed bugs are not described as open
    [ ${#why[@]} -eq 0 ] && [ -n "$bug" ] && why+=("passes, but is marked as a known bug: remove the --bug marker")
    if [ ${#why[@]} -eq 0 ]; then
        SL_PASS=$((SL_PASS + 1))
        echo "ok - $name"
        return 0
    fi
    SL_FAIL=$((SL_FAIL + 1))
    local msg
    msg=$(printf '%s; ' "${why[@]}")
    if [ -n "$bug" ]; then
        echo "not ok - $name: ${msg%; } [KNOWN BUG in $bug]"
    else
        echo "not ok - $name: ${msg%; }"
    fi
    echo "#   command: $*"
    sed -n '1,12s/^/#   stderr: /p' "$se"
    sl_fail_fast
    return 1
}

# SL_FAIL_FAST=1 (tests/mutation/run.sh, not CTest): stop at the first failure
sl_fail_fast() {
    [ "${SL_FAIL_FAST:-0}" = 1 ] || return 0
    echo "# SL_FAIL_FAST=1: stopping at the first failure"
    sl_finish
}

# sl_small_reservoir: G = a 720-state reservoir model ($W/good.h5), solved
# into $W/good_sol.h5; S = $W/sol.h5, the name the cases write to
sl_small_reservoir() {
    G=$W/good.h5
    S=$W/sol.h5
    expect "setup: a small reservoir model builds" --code 0 -- \
        "$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=20 --param inflow_classes=3 -o "$G"
    expect "setup: it solves" --code 0 -- "$SLUICE" solve -q "$G" -o "$W/good_sol.h5"
}

# note_ok NAME / note_fail NAME REASON: a case checked by the script itself
note_ok() {
    SL_PASS=$((SL_PASS + 1))
    echo "ok - $1"
}
note_fail() {
    SL_FAIL=$((SL_FAIL + 1))
    echo "not ok - $1: $2"
    sl_fail_fast
}

# py SCRIPT ARGS...: run a Python snippet (h5py/numpy available); args in sys.argv[1:]
py() {
    local code=$1
    shift
    "$PY" -c "$code" "$@"
}

sl_finish() {
    echo "$SL_PASS passed, $SL_FAIL failed"
    [ "$SL_FAIL" -eq 0 ]
    exit $?
}
