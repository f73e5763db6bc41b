# shellcheck shell=bash
# lib.sh - shared helpers for the bench/*.sh scripts (sourced, not run).
#
# Every benchmark is called as
#     bench/NAME.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
# SOURCE_DIR defaults to the directory above this script. Environment:
#     PYTHON    a python3 with numpy, scipy and h5py (default: the first of
#               /usr/bin/python3 and python3 that imports all three)
#     MPIRUN    the MPI launcher (default: mpirun)
#     REBUILD=1 rebuild the benchmark model even if WORKDIR already has it
#     MODEL_PARAMS  generator parameters of the benchmark model (default
#               "--param storage_levels=4000 --param inflow_classes=20";
#               smaller values make a quick trial run of a script)

set -u

bench_usage() {
    echo "usage: $0 SLUICE_BINARY WORKDIR [SOURCE_DIR]" >&2
    exit 64
}

bench_init() {
    [ $# -ge 2 ] || bench_usage
    SLUICE=$1
    WORK=$2
    BENCH_DIR=$(cd "$(dirname "$0")" && pwd)
    SRC=${3:-$(cd "$BENCH_DIR/.." && pwd)}
    case $SLUICE in /*) ;; *) SLUICE=$(pwd)/$SLUICE ;; esac
    [ -x "$SLUICE" ] || { echo "$0: $SLUICE is not executable" >&2; exit 66; }
    [ -f "$SRC/examples/reservoir.c" ] || { echo "$0: $SRC/examples/reservoir.c not found (give SOURCE_DIR)" >&2; exit 66; }
    [ -x /usr/bin/time ] || { echo "$0: needs GNU time at /usr/bin/time (Debian package 'time')" >&2; exit 69; }
    mkdir -p "$WORK" || exit 73
    WORK=$(cd "$WORK" && pwd)
    MPIRUN=${MPIRUN:-mpirun}
    if [ "$(id -u)" = 0 ]; then
        # OpenMPI refuses to run as root without these
        export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
    fi
    if [ -z "${PYTHON:-}" ]; then
        for p in /usr/bin/python3 python3; do
            if "$p" -c 'import numpy, scipy, h5py' 2>/dev/null; then PYTHON=$p; break; fi
        done
    fi
    [ -n "${PYTHON:-}" ] || { echo "$0: no python3 with numpy, scipy and h5py (set PYTHON)" >&2; exit 69; }
    export PYTHON
    # the big reservoir: 4000 storage levels x 20 inflow classes x 12 months
    BIG_PARAMS=${MODEL_PARAMS:-"--param storage_levels=4000 --param inflow_classes=20"}
    BIG=$WORK/big.h5
    if [ -n "${MODEL_PARAMS:-}" ]; then BIG=$WORK/trial.h5; fi
}

# One line describing the machine and the moment.
bench_machine() {
    local cpu
    cpu=$(grep -m1 '^model name' /proc/cpuinfo 2>/dev/null | sed 's/^[^:]*: *//')
    echo "date $(date -u '+%Y-%m-%d %H:%M UTC'); nproc $(nproc); cpu ${cpu:-unknown};" \
         "mem $(awk '/MemTotal/ {printf "%.1f GiB", $2/1048576}' /proc/meminfo);" \
         "load average $(cut -d' ' -f1-3 /proc/loadavg)"
}

# bench_timed PREFIX CMD...: run CMD under GNU time; stdout to PREFIX.out,
# stderr to PREFIX.err, the time report to PREFIX.time. Returns CMD's status.
bench_timed() {
    local prefix=$1
    shift
    /usr/bin/time -v -o "$prefix.time" "$@" >"$prefix.out" 2>"$prefix.err"
}

# bench_timed_ranks PREFIX NP CMD...: the same under $MPIRUN -np NP, with one
# time report per rank (PREFIX.time.0, PREFIX.time.1, ...) so peak RSS is per
# rank; the wall time of the whole launch goes to PREFIX.time.
bench_timed_ranks() {
    local prefix=$1 np=$2
    shift 2
    rm -f "$prefix".time.*
    # shellcheck disable=SC2016  # expanded by the per-rank sh, not here
    /usr/bin/time -v -o "$prefix.time" \
        "$MPIRUN" -np "$np" sh -c 'exec /usr/bin/time -v -o "$0.${OMPI_COMM_WORLD_RANK:-${PMI_RANK:-0}}" "$@"' \
        "$prefix.time" "$@" >"$prefix.out" 2>"$prefix.err"
}

# bench_tv FILE FIELD: one figure from a GNU time -v report.
#   wall (s), user (s), sys (s), cpu (user+sys, s), rss (peak resident, MB)
bench_tv() {
    awk -v want="$2" '
        /Elapsed \(wall clock\)/ { n = split($NF, a, ":"); w = 0; for (i = 1; i <= n; i++) w = w * 60 + a[i] }
        /User time/ { u = $NF }
        /System time/ { s = $NF }
        /Maximum resident set size/ { r = $NF / 1024 }
        /Minor \(reclaiming a frame\) page faults/ { f = $NF }
        END {
            if (want == "wall") printf "%.2f\n", w
            else if (want == "user") printf "%.2f\n", u
            else if (want == "sys") printf "%.2f\n", s
            else if (want == "cpu") printf "%.2f\n", u + s
            else if (want == "rss") printf "%.0f\n", r
            else if (want == "minflt") printf "%d\n", f
        }' "$1"
}

# The Python side of the scripts' reports starts with these definitions
# (run it with bench_python):
#   tv(path): a GNU time -v report as a dict: wall, user, sys, cpu (user +
#   sys) in seconds, rss (peak resident) in bytes, pct (CPU percent, text)
BENCH_PY_LIB='
def tv(path):
    d = {}
    for line in open(path):
        line = line.strip()
        if line.startswith("Elapsed (wall clock)"):
            w = 0.0
            for part in line.split()[-1].split(":"):
                w = w * 60 + float(part)
            d["wall"] = w
        elif line.startswith("User time"):
            d["user"] = float(line.split()[-1])
        elif line.startswith("System time"):
            d["sys"] = float(line.split()[-1])
        elif line.startswith("Maximum resident set size"):
            d["rss"] = int(line.split()[-1]) * 1024
        elif line.startswith("Percent of CPU"):
            d["pct"] = line.split()[-1]
    d["cpu"] = d["user"] + d["sys"]
    return d
'

# bench_python ARGS... <<'EOF' ... EOF: run the Python program on stdin
# with $PYTHON, BENCH_PY_LIB defined first; ARGS become sys.argv[1:].
bench_python() {
    local prog
    prog=$(cat) || return 70
    "$PYTHON" -c "$BENCH_PY_LIB
$prog" "$@"
}

# bench_big: make sure $BIG (the ~10^6-state reservoir) exists; a file
# $BIG.params records the parameters it was built with.
bench_big() {
    if [ -f "$BIG" ] && [ "${REBUILD:-0}" != 1 ] && [ -f "$BIG.params" ] &&
        [ "$(cat "$BIG.params")" = "$BIG_PARAMS" ] && "$SLUICE" info "$BIG" >/dev/null 2>&1; then
        return 0
    fi
    echo "building $BIG (reservoir $BIG_PARAMS) ..." >&2
    # shellcheck disable=SC2086
    "$SLUICE" build "$SRC/examples/reservoir.c" $BIG_PARAMS --cache "$WORK/gen-cache" -q -o "$BIG" ||
        { echo "$0: building the benchmark model failed" >&2; exit 70; }
    echo "$BIG_PARAMS" >"$BIG.params"
}

# bench_record_params: after a build of $BIG by the caller
bench_record_params() {
    echo "$BIG_PARAMS" >"$BIG.params"
}

# bench_fail MSG: say what failed, show the tail of the logs, stop.
bench_fail() {
    echo "$0: $1" >&2
    exit 70
}
