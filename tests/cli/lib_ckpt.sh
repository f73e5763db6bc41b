# lib_ckpt.sh - helpers shared by the checkpoint, signal and MPI shell tests
# (tests/cli/checkpoint_*.sh, tests/mpi/*.sh). Sourced, not run.
#
#     . "$(dirname "$0")/../cli/lib_ckpt.sh"      # or "$(dirname "$0")/lib_ckpt.sh"
#     ck_init "$@"                 # SLUICE_BINARY WORKDIR SOURCE_DIR; cd WORKDIR (emptied)
#     ck_ok "what"  /  ck_not_ok "what" "why"  /  ck_check "what" COMMAND...
#     ck_finish                    # prints "N passed, M failed"; exit 0 or 1
#
# Environment: SLUICE_PYTHON (python3 with numpy and h5py), SLUICE_CACHE,
# SLUICE_MPIEXEC (mpirun, for ck_mpi_init), SLUICE_TEST_SEED (random delays).
# A missing prerequisite (all are required by the README and installed by
# tools/setup) fails the test with the reason; nothing is skipped.

CK_PASS=0
CK_FAIL=0

ck_skip() {
    echo "not ok - missing prerequisite: $*"
    echo "0 passed, 1 failed"
    exit 1
}

ck_init() {
    if [ $# -lt 3 ]; then
        echo "usage: bash $0 SLUICE_BINARY WORKDIR SOURCE_DIR" >&2
        exit 64
    fi
    SLUICE=$1
    W=$2
    SRC=$3
    case $SLUICE in /*) ;; *) SLUICE=$PWD/$SLUICE ;; esac
    case $SRC in /*) ;; *) SRC=$PWD/$SRC ;; esac
    case $W in /*) ;; *) W=$PWD/$W ;; esac
    if [ ! -x "$SLUICE" ]; then
        echo "not ok - sluice binary $SLUICE is not executable"
        echo "0 passed, 1 failed"
        exit 1
    fi
    [ -n "${EPOCHREALTIME:-}" ] || ck_skip "bash 5 or newer is needed (EPOCHREALTIME)"
    local cand
    PY=""
    for cand in "${SLUICE_PYTHON:-}" python3 /usr/bin/python3; do
        [ -n "$cand" ] || continue
        if "$cand" -c 'import h5py, numpy' 2>/dev/null; then PY=$cand; break; fi
    done
    [ -n "$PY" ] || ck_skip "no python3 that imports h5py and numpy (set SLUICE_PYTHON)"
    rm -rf "$W" && mkdir -p "$W" || exit 1
    cd "$W" || exit 1
    export SLUICE_CACHE=${SLUICE_CACHE:-$W/cache}
    # a walltime or fault hook inherited from the caller would change every run
    unset SLUICE_WALLTIME SLURM_JOB_END_TIME SLUICE_FAULT_CKPT
    if [ "$(id -u)" = 0 ]; then
        export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
    fi
    CK_SEED=${SLUICE_TEST_SEED:-20240611}
    RANDOM=$CK_SEED
    CK_TOOL=$W/ckpt_tool.py
    _ck_write_tool >"$CK_TOOL"
}

ck_ok() {
    CK_PASS=$((CK_PASS + 1))
    echo "ok - $1"
}

ck_not_ok() {
    CK_FAIL=$((CK_FAIL + 1))
    echo "not ok - $1${2:+: $2}"
}

# ck_check WHAT COMMAND...: ok if COMMAND exits 0; its output is shown on failure
ck_check() {
    local what=$1 out
    shift
    if out=$("$@" 2>&1); then
        ck_ok "$what"
    else
        ck_not_ok "$what" "$(printf '%s' "$out" | tail -n 5 | tr '\n' ' ')"
    fi
}

# ck_rc WHAT EXPECTED ACTUAL [LOG]: exit status check; prints the log tail on failure
ck_rc() {
    if [ "$3" = "$2" ]; then
        ck_ok "$1 (exit $3)"
    else
        ck_not_ok "$1" "exit $3, expected $2"
        [ -n "${4:-}" ] && [ -f "$4" ] && tail -n 8 "$4" | sed 's/^/#   /'
    fi
    return 0
}

ck_finish() {
    echo "$CK_PASS passed, $CK_FAIL failed"
    [ "$CK_FAIL" -eq 0 ]
    exit $?
}

# ck_tool SUBCOMMAND ARGS...: the Python checker written by ck_init
ck_tool() {
    "$PY" "$CK_TOOL" "$@"
}

# ck_now: seconds since the epoch with microseconds
ck_now() {
    echo "$EPOCHREALTIME"
}

# ck_us: microseconds since the epoch as an integer (no process started)
ck_us() {
    local t=${EPOCHREALTIME//[.,]/}
    echo $((10#$t))
}

# ck_since T0: seconds elapsed since T0 (from ck_now), two decimals
ck_since() {
    awk -v a="$1" -v b="$EPOCHREALTIME" 'BEGIN { printf "%.2f", b - a }'
}

# ck_lt A B: true if the number A < B
ck_lt() {
    awk -v a="$1" -v b="$2" 'BEGIN { exit !(a < b) }'
}

# ck_wait PID SECONDS: wait for PID (a child of this shell) at most SECONDS;
# returns its exit status, or 124 after killing it with SIGKILL at the limit.
ck_wait() {
    local pid=$1 limit=$2 t0=$EPOCHREALTIME
    while kill -0 "$pid" 2>/dev/null; do
        if ! ck_lt "$(ck_since "$t0")" "$limit"; then
            kill -9 "$pid" 2>/dev/null
            wait "$pid" 2>/dev/null
            return 124
        fi
        sleep 0.02
    done
    wait "$pid"
}

# ck_wait_grep PATTERN FILE SECONDS [PID]: wait until FILE has a line matching
# the extended regex PATTERN (1 on timeout, or if PID ends first without it)
ck_wait_grep() {
    local t0=$EPOCHREALTIME
    while ! grep -Eq -- "$1" "$2" 2>/dev/null; do
        ck_lt "$(ck_since "$t0")" "$3" || return 1
        if [ -n "${4:-}" ] && ! kill -0 "$4" 2>/dev/null; then
            grep -Eq -- "$1" "$2" 2>/dev/null
            return $?
        fi
        sleep 0.01
    done
    return 0
}

# ck_wait_file PATH SECONDS: wait until PATH exists
ck_wait_file() {
    local t0=$EPOCHREALTIME
    while [ ! -e "$1" ]; do
        ck_lt "$(ck_since "$t0")" "$2" || return 1
        sleep 0.01
    done
    return 0
}

# ck_rand_ms LO HI: uniform random integer in [LO, HI] (bash RANDOM, seeded by ck_init)
ck_rand_ms() {
    local span=$(($2 - $1 + 1))
    echo $(($1 + (RANDOM * 32768 + RANDOM) % span))
}

# ck_ms_to_s MS: "1.234"
ck_ms_to_s() {
    printf '%d.%03d' $(($1 / 1000)) $(($1 % 1000))
}

# ck_newest_ckpt DIR: path of the newest ckpt-NNNNNN.h5 in DIR (empty if none)
ck_newest_ckpt() {
    local f newest=""
    for f in "$1"/ckpt-*.h5; do
        [ -e "$f" ] && newest=$f
    done
    echo "$newest"
}

# ck_info_complete FILE: `sluice info FILE` exits 0 and reports a complete checkpoint
ck_info_complete() {
    local out
    out=$("$SLUICE" info "$1" 2>&1) || { echo "sluice info $1 failed: $out"; return 1; }
    case $out in
        *"sluice checkpoint"*INCOMPLETE*) echo "sluice info: $1 is incomplete"; return 1 ;;
        *"sluice checkpoint"*) return 0 ;;
    esac
    echo "sluice info $1: not reported as a checkpoint: $out"
    return 1
}

# ck_mpi_startup_note LOG: say so when LOG shows that Open MPI itself failed
# to start (not a sluice result; seen when concurrent one-rank runs share a
# singleton session directory)
ck_mpi_startup_note() {
    if grep -qE "orte_init failed|ompi_rte_init failed|session_dir" "$1" 2>/dev/null; then
        echo "# note: $1: Open MPI start-up failed before sluice ran (session directory:" \
            "$(grep -m1 -A1 "Directory:" "$1" | tr -s ' \n' ' '))"
    fi
}

# ck_build_reservoir OUT [--param N=V]...: the example reservoir model
ck_build_reservoir() {
    local out=$1
    shift
    "$SLUICE" build "$SRC/examples/reservoir.c" "$@" -o "$out" -q
}

# The solver's own account of a stop or checkpoint request (src/solve/methods.c
# logs it on its own clock, seconds from the start of the solve):
#   solve: signal 15 (TERM) arrived at 1.955 s; acted on at the sweep boundary at
#          1.956 s (iteration 1185; previous boundary 1.954 s)
#   solve: --walltime 3.000 s: stop due at 2.400 s (margin 0.600 s); acted on at
#          the sweep boundary at 2.402 s (iteration 969; previous boundary 2.397 s)
# What it promises, whatever the load: the request is acted on at the FIRST
# sweep boundary after it (previous boundary < arrival or due time <= acted),
# and nothing is computed after that (the checkpoint holds that iteration).

# ck_acted_signal LOG SIG N: checks the Nth "signal ... (SIG) arrived" line of
# LOG; sets CK_ACTED_MSG (the figures, or why not) and CK_ACTED_ITER; status 1
# if absent or not acted on at the first boundary. Call it directly, not in $().
ck_acted_signal() {
    local line
    line=$(grep -E "^solve: signal [0-9]+ \($2\) arrived at " "$1" | sed -n "${3}p")
    [ -n "$line" ] || { CK_ACTED_MSG="no 'signal ... ($2) arrived' line number $3 in $1"; CK_ACTED_ITER=""; return 1; }
    CK_ACTED_ITER=$(echo "$line" | sed -E 's/.*\(iteration ([0-9]+);.*/\1/')
    CK_ACTED_MSG=$(echo "$line" | awk '{
        if (!match($0, /arrived at -?[0-9.]+ s/)) { print "unparsed: " $0; exit 1 }
        at = substr($0, RSTART + 11, RLENGTH - 13) + 0
        match($0, /sweep boundary at -?[0-9.]+ s/); acted = substr($0, RSTART + 18, RLENGTH - 20) + 0
        first = ($0 ~ /previous boundary none/)
        if (!first) { match($0, /previous boundary -?[0-9.]+ s/); prev = substr($0, RSTART + 18, RLENGTH - 20) + 0 }
        ok = (at <= acted) && (first || prev <= at)
        printf "arrived %.3f s, acted on %.3f s, previous boundary %s (solver clock)%s\n", at, acted,
               first ? "none" : sprintf("%.3f s", prev), ok ? "" : ": NOT the first boundary after the signal"
        exit !ok }')
}

# ck_acted_walltime LOG W: the walltime line; due time must be W - margin with
# margin = min(max(10, 0.05 W), 0.2 W) for W < 60 (the documented rule), and it
# must be acted on at the first boundary at or after it. Sets CK_ACTED_MSG and
# CK_ACTED_ITER as ck_acted_signal does.
ck_acted_walltime() {
    local line
    line=$(grep -E "^solve: --walltime [0-9.]+ s: stop due at " "$1" | head -n 1)
    [ -n "$line" ] || { CK_ACTED_MSG="no '--walltime ... stop due at' line in $1"; CK_ACTED_ITER=""; return 1; }
    CK_ACTED_ITER=$(echo "$line" | sed -E 's/.*\(iteration ([0-9]+);.*/\1/')
    CK_ACTED_MSG=$(echo "$line" | awk -v w="$2" '{
        match($0, /stop due at [0-9.]+ s/); due = substr($0, RSTART + 12, RLENGTH - 14) + 0
        match($0, /sweep boundary at [0-9.]+ s/); acted = substr($0, RSTART + 18, RLENGTH - 20) + 0
        first = ($0 ~ /previous boundary none/)
        if (!first) { match($0, /previous boundary [0-9.]+ s/); prev = substr($0, RSTART + 18, RLENGTH - 20) + 0 }
        m = 0.05 * w; if (m < 10) m = 10; if (w < 60 && m > 0.2 * w) m = 0.2 * w
        want = w - m
        okdue = (due - want < 0.0005 && want - due < 0.0005)
        # the solver holds the stop for one iteration after a (re)start whose
        # start-up outlasted the due time (every run makes progress); then
        # the boundary it acts on is the first one after that iteration
        held = ($0 ~ /held for this run.s first iteration/)
        ok = okdue && due <= acted && (first || prev <= due || held)
        printf "due %.3f s (expected %.3f), acted on %.3f s, previous boundary %s (solver clock)%s\n", due, want, acted,
               first ? "none" : sprintf("%.3f s", prev), ok ? "" : ": NOT the first boundary after the due time"
        exit !ok }')
}

# ck_mpi_init: MPIEXEC and MPIFLAGS for ck_mpirun, or skip
ck_mpi_init() {
    MPIEXEC=${SLUICE_MPIEXEC:-}
    [ -n "$MPIEXEC" ] || MPIEXEC=$(command -v mpirun || command -v mpiexec || true)
    if [ -z "$MPIEXEC" ] || [ ! -x "$MPIEXEC" ]; then
        ck_skip "no mpirun (set SLUICE_MPIEXEC)"
    fi
    MPIFLAGS=()
    if "$MPIEXEC" --version 2>&1 | grep -q "Open MPI"; then
        MPIFLAGS=(--oversubscribe)
    fi
    # CK_HANG: seconds after which a run under mpirun is taken to hang
    # (`timeout "$CK_HANG" mpirun ...`). A guard against a deadlock, not a
    # speed check: with both cores busy (stress-ng, the rest of the suite and
    # other work, load average 8-9) a 3-rank build of 7,200 states in blocks
    # of 777 transitions ran past the 300 s this guard used to be.
    CK_HANG=${SLUICE_TEST_HANG_GUARD:-1200}
}

# ck_mpirun N ARGS...: sluice ARGS on N ranks
ck_mpirun() {
    local n=$1
    shift
    "$MPIEXEC" -np "$n" "${MPIFLAGS[@]}" "$SLUICE" "$@"
}

# The Python checker. It reads the files with h5py and never trusts sluice's
# own numbers: checkpoint checksums are recomputed here from the stored arrays.
_ck_write_tool() {
    cat <<'PYEOF'
"""ckpt_tool.py - checks for the checkpoint and MPI shell tests (written by lib_ckpt.sh)."""
import glob
import os
import re
import sys

import h5py
import numpy as np

M64 = np.uint64(0xFFFFFFFFFFFFFFFF)


def mix64(x):
    """splitmix64 finaliser on a uint64 array (wrapping arithmetic)."""
    with np.errstate(over="ignore"):
        x = x + np.uint64(0x9E3779B97F4A7C15)
        x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return x ^ (x >> np.uint64(31))


def checksum_value(v):
    idx = np.arange(len(v), dtype=np.uint64)
    bits = np.ascontiguousarray(v, dtype="<f8").view("<u8").astype(np.uint64)
    with np.errstate(over="ignore"):
        return int(np.sum(mix64(mix64(idx) ^ bits), dtype=np.uint64))


def checksum_policy(p):
    idx = np.arange(len(p), dtype=np.uint64)
    with np.errstate(over="ignore"):
        u = np.asarray(p, dtype=np.int64).astype(np.uint32).astype(np.uint64)
        return int(np.sum(mix64(mix64(idx + np.uint64(7)) ^ u), dtype=np.uint64))


def attr(f, name):
    a = f.attrs[name]
    if isinstance(a, bytes):
        return a.decode()
    if isinstance(a, np.ndarray) and a.shape == ():
        a = a[()]
    if isinstance(a, np.bytes_):
        return a.decode()
    return a


def check_ckpt(path):
    """'' if path is a complete checkpoint whose checksums match, else why not."""
    try:
        with h5py.File(path, "r") as f:
            if attr(f, "sluice_format") != "checkpoint":
                return "sluice_format is not checkpoint"
            if int(attr(f, "complete")) != 1:
                return "complete mark missing"
            v = f["/value"][...]
            p = f["/policy"][...]
            n = int(attr(f, "n_states"))
            if len(v) != n or len(p) != n:
                return "length %d/%d, n_states %d" % (len(v), len(p), n)
            if "%016x" % checksum_value(v) != attr(f, "value_checksum"):
                return "value checksum mismatch"
            if "%016x" % checksum_policy(p) != attr(f, "policy_checksum"):
                return "policy checksum mismatch"
    except Exception as e:  # unreadable, truncated, missing attribute
        return "unreadable: %s" % e
    return ""


def cmd_validate(args):
    """validate DIR [PID]: every ckpt-*.h5 in DIR must be a valid checkpoint.
    Prints 'valid N newest SEQ partial K mine M' (mine: partials left by PID)."""
    d = args[0]
    pid = args[1] if len(args) > 1 else None
    names = sorted(n for n in os.listdir(d) if re.fullmatch(r"ckpt-\d+\.h5", n)) if os.path.isdir(d) else []
    bad = []
    for n in names:
        why = check_ckpt(os.path.join(d, n))
        if why:
            bad.append("%s: %s" % (n, why))
    partials = [n for n in (os.listdir(d) if os.path.isdir(d) else []) if n.endswith(".partial")]
    mine = [n for n in partials if pid is not None and ("." + pid + ".partial") in n]
    newest = names[-1] if names else "none"
    print("valid %d newest %s partial %d mine %d" % (len(names) - len(bad), newest, len(partials), len(mine)))
    for b in bad:
        print("INVALID " + b)
    return 1 if bad else 0


def read_solution(path):
    with h5py.File(path, "r") as f:
        return f["/value"][...], f["/policy"][...], dict((k, attr(f, k)) for k in f.attrs)


def cmd_same(args):
    """same A B: /value and /policy bitwise equal."""
    va, pa, _ = read_solution(args[0])
    vb, pb, _ = read_solution(args[1])
    if va.shape != vb.shape:
        print("shapes differ %s %s" % (va.shape, vb.shape))
        return 1
    nv = int(np.sum(va.view(np.uint64) != vb.view(np.uint64)))
    npol = int(np.sum(pa != pb))
    md = float(np.max(np.abs(va - vb))) if len(va) else 0.0
    print("value entries differing %d (max abs diff %.3e), policy entries differing %d" % (nv, md, npol))
    return 0 if nv == 0 and npol == 0 else 1


def model_arrays(path):
    with h5py.File(path, "r") as f:
        fp = f["/state/first_pair"][...].astype(np.int64)
        act = f["/pair/action"][...].astype(np.int64)
        rew = f["/pair/reward"][...]
        ft = f["/pair/first_transition"][...].astype(np.int64)
        tgt = f["/transition/target"][...].astype(np.int64)
        prob = f["/transition/probability"][...]
        g = float(attr(f, "discount"))
    return fp, act, rew, ft, tgt, prob, g


def qvalues(model, v):
    fp, act, rew, ft, tgt, prob, g = model
    contrib = prob * v[tgt]
    sums = np.zeros(len(rew))
    nz = ft[1:] > ft[:-1]
    sums[nz] = np.add.reduceat(contrib, ft[:-1][nz])
    return rew + g * sums


def cmd_close(args):
    """close MODEL A B TOL TIE: max|vA - vB| <= TOL; policies equal except at
    ties, where both actions' Q values (from vA) lie within TIE of each other.
    Prints the figures."""
    model = model_arrays(args[0])
    va, pa, ia = read_solution(args[1])
    vb, pb, ib = read_solution(args[2])
    tol = float(args[3])
    tie = float(args[4])
    md = float(np.max(np.abs(va - vb)))
    diff = np.nonzero(pa != pb)[0]
    fp, act = model[0], model[1]
    q = qvalues(model, va)
    gaps = []
    for s in diff:
        k0, k1 = fp[s], fp[s + 1]
        qa = q[k0 + np.nonzero(act[k0:k1] == pa[s])[0][0]]
        qb = q[k0 + np.nonzero(act[k0:k1] == pb[s])[0][0]]
        gaps.append(abs(qa - qb))
    mg = max(gaps) if gaps else 0.0
    print("max abs value diff %.3e (limit %.1e); policy differs in %d of %d states; largest Q gap there %.3e (tie limit %.0e)"
          % (md, tol, len(diff), len(pa), mg, tie))
    return 0 if md <= tol and mg <= tie else 1


def cmd_attr(args):
    """attr FILE NAME: print a root attribute."""
    with h5py.File(args[0], "r") as f:
        print(attr(f, args[1]))
    return 0


def cmd_flip(args):
    """flip FILE DATASET: invert 8 bytes in the middle of DATASET's stored bytes
    (first chunk, or the contiguous storage), found through the HDF5 library."""
    with h5py.File(args[0], "r") as f:
        d = f[args[1]]
        if d.chunks is not None:
            info = d.id.get_chunk_info(0)
            off, size = info.byte_offset, info.size
        else:
            off, size = d.id.get_offset(), d.id.get_storage_size()
    pos = off + size // 2
    with open(args[0], "r+b") as fh:
        fh.seek(pos)
        b = bytearray(fh.read(8))
        fh.seek(pos)
        fh.write(bytes(x ^ 0xFF for x in b))
    print("flipped 8 bytes at offset %d of %s (%s: %d stored bytes at %d)" % (pos, args[0], args[1], size, off))
    return 0


def cmd_flip_attr(args):
    """flip_attr FILE NAME: change one byte of a root attribute's stored value
    in place (located by searching the file for the attribute's name)."""
    with open(args[0], "rb") as fh:
        data = bytearray(fh.read())
    with h5py.File(args[0], "r") as f:
        val = np.int64(f.attrs[args[1]])
    key = args[1].encode() + b"\0"
    at = data.find(key)
    if at < 0:
        print("attribute name not found in the file")
        return 1
    raw = val.tobytes()
    vat = data.find(raw, at)
    if vat < 0 or vat - at > 256:
        print("attribute value not found near its name")
        return 1
    data[vat] ^= 0x01
    with open(args[0], "r+b") as fh:
        fh.seek(vat)
        fh.write(bytes([data[vat]]))
    print("changed byte %d (attribute %s = %d)" % (vat, args[1], int(val)))
    return 0


def cmd_set_attr(args):
    """set_attr FILE NAME INT: rewrite an integer root attribute with h5py."""
    with h5py.File(args[0], "r+") as f:
        f.attrs[args[1]] = np.int64(int(args[2]))
    return 0


def cmd_set_value(args):
    """set_value FILE DATASET INDEX VALUE: rewrite one element with h5py (the
    file stays readable; only a checksum can tell)."""
    with h5py.File(args[0], "r+") as f:
        d = f[args[1]]
        d[int(args[2])] = np.array(float(args[3])).astype(d.dtype)
    return 0


def main():
    cmds = {"validate": cmd_validate, "same": cmd_same, "close": cmd_close, "attr": cmd_attr,
            "flip": cmd_flip, "flip_attr": cmd_flip_attr, "set_attr": cmd_set_attr, "set_value": cmd_set_value}
    if len(sys.argv) < 2 or sys.argv[1] not in cmds:
        print("usage: ckpt_tool.py %s ..." % "|".join(sorted(cmds)))
        return 64
    return cmds[sys.argv[1]](sys.argv[2:])


if __name__ == "__main__":
    sys.exit(main())
PYEOF
}

# ---- self-test ------------------------------------------------------------------------------
# CTest runs every tests/cli/*.sh, this file included. Run (not sourced), it
# checks its own checkers against files sluice writes: each must accept the
# genuine file and reject a damaged one.
if [ "${BASH_SOURCE[0]}" = "$0" ]; then
    ck_init "$@"
    ck_build_reservoir m.h5 || { ck_not_ok "build the reservoir model"; ck_finish; }
    "$SLUICE" solve m.h5 -o s.h5 --method jacobi --checkpoint c --max-iterations 50 >run.log 2>&1
    ck_rc "a checkpoint to check (--max-iterations 50)" 75 $? run.log
    ck_check "validate accepts sluice's checkpoint (checksums recomputed in Python match)" ck_tool validate c
    ck_check "sluice info reports it complete" ck_info_complete c/ckpt-000001.h5
    for what in /value /policy; do
        rm -rf "d$what" && mkdir -p "d$what" && cp c/ckpt-000001.h5 "d$what/"
        ck_tool flip "d$what/ckpt-000001.h5" "$what" >/dev/null
        if out=$(ck_tool validate "d$what"); then
            ck_not_ok "validate accepts a checkpoint with flipped $what bytes" "$out"
        else
            ck_ok "validate rejects a checkpoint with flipped $what bytes"
        fi
    done
    mkdir -p rw && cp c/ckpt-000001.h5 rw/ && ck_tool set_value rw/ckpt-000001.h5 /value 3 0.25
    if out=$(ck_tool validate rw); then
        ck_not_ok "validate accepts a checkpoint whose /value was rewritten (readable, stale checksum)" "$out"
    else
        ck_ok "validate rejects a checkpoint whose /value was rewritten: $(echo "$out" | tail -n 1)"
    fi
    mkdir -p inc && cp c/ckpt-000001.h5 inc/ && ck_tool set_attr inc/ckpt-000001.h5 complete 0
    if ck_info_complete inc/ckpt-000001.h5 >/dev/null; then
        ck_not_ok "ck_info_complete accepts a checkpoint without its complete mark"
    else
        ck_ok "ck_info_complete rejects a checkpoint without its complete mark"
    fi
    "$SLUICE" solve m.h5 -o s.h5 --method jacobi >run2.log 2>&1
    ck_rc "a solution to compare" 0 $? run2.log
    "$PY" - <<'PYEOF'
import shutil
import h5py
import numpy as np
for name, k, d in (("ulp.h5", 7, None), ("far.h5", 7, 1e-3)):
    shutil.copy("s.h5", name)
    with h5py.File(name, "r+") as f:
        v = f["/value"]
        v[k] = np.nextafter(v[k], np.inf) if d is None else v[k] + d
PYEOF
    ck_check "same accepts a solution compared with itself" ck_tool same s.h5 s.h5
    if out=$(ck_tool same s.h5 ulp.h5); then
        ck_not_ok "same accepts a value changed by one ulp" "$out"
    else
        ck_ok "same rejects a value changed by one ulp: $out"
    fi
    ck_check "close accepts a 1e-3 change with limit 1e-2" ck_tool close m.h5 s.h5 far.h5 1e-2 1e-9
    if out=$(ck_tool close m.h5 s.h5 far.h5 2e-6 1e-9); then
        ck_not_ok "close accepts a 1e-3 change with limit 2e-6" "$out"
    else
        ck_ok "close rejects a 1e-3 change with limit 2e-6: $out"
    fi
    sleep 5 &
    t0=$EPOCHREALTIME
    ck_wait $! 0.5
    rc=$?
    if [ $rc -eq 124 ] && ck_lt "$(ck_since "$t0")" 2; then
        ck_ok "ck_wait kills a process at its time limit (status 124 after $(ck_since "$t0") s)"
    else
        ck_not_ok "ck_wait: status $rc after $(ck_since "$t0") s, expected 124 after 0.5 s"
    fi
    ck_finish
fi
