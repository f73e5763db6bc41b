#!/bin/bash
# bad_input_more.sh - bad input the other bad_input_*.sh suites do not cover:
# permission denied and read-only directories (run as an unprivileged user
# through setpriv when the test runs as root), a full disk for the solution
# and the model, out of memory, generators that run away, and signals
# during start-up. Every case is a row of docs/bad-input.md. (Model
# datasets, solutions and checkpoints: bad_input_datasets.sh.)
# usage: bash bad_input_more.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

sl_small_reservoir # $G (720 states), its solution $W/good_sol.h5, $S the output name

"$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=200 --param inflow_classes=8 -o "$W/mid.h5"
# a model that claims 2^62 states (for the out-of-memory case)
"$PY" - "$G" "$W/n_states_huge.h5" <<'PYEOF' || note_fail "setup: n_states_huge.h5" "h5py edit failed"
import shutil, sys
import h5py
import numpy as np
shutil.copyfile(sys.argv[1], sys.argv[2])
with h5py.File(sys.argv[2], "r+") as f:
    f.attrs.modify("n_states", np.int64(1) << 62)
PYEOF
# ---------------------------------------------------------------- permissions
# as root, drop to nobody for these (root ignores file permissions)
as_user=()
if [ "$(id -u)" = 0 ]; then
    if command -v setpriv >/dev/null; then
        as_user=(setpriv --reuid=65534 --regid=65534 --clear-groups --)
    else
        note_fail "permissions" "running as root and setpriv (util-linux) is missing"
    fi
fi
P=$W/perm
mkdir -p "$P/ro" "$P/rw" && cp "$G" "$P/model.h5" && cp "$G" "$P/secret.h5" && chmod 000 "$P/secret.h5"
chmod 777 "$P/rw" && chmod 555 "$P/ro" && chmod 755 "$P" && chmod 644 "$P/model.h5" && chmod o+x "$W"
echo keep >"$P/ro/old.h5"
expect "info: model file not readable (permission denied)" --code "66|74" --err "secret.h5" \
    --err "ermission denied" -- "${as_user[@]}" "$SLUICE" info "$P/secret.h5"
expect "solve: output into a read-only directory" --code 73 --err "ro" --gone "$P/ro/s.h5" -- \
    "${as_user[@]}" env SLUICE_CACHE="$P/rw/cache" "$SLUICE" solve -q "$P/model.h5" -o "$P/ro/s.h5"
expect "solve: over an existing file in a read-only directory (the file is kept)" --code 73 --err "ro" \
    --keep "$P/ro/old.h5" -- "${as_user[@]}" "$SLUICE" solve -q "$P/model.h5" -o "$P/ro/old.h5"
expect "solve: checkpoint directory not writable" --code 73 --err "ro" --gone "$P/rw/s.h5" -- \
    "${as_user[@]}" "$SLUICE" solve -q "$P/model.h5" -o "$P/rw/s.h5" --checkpoint "$P/ro/ck"
expect "build: output into a read-only directory" --code 73 --err "ro" --gone "$P/ro/m.h5" -- \
    "${as_user[@]}" env SLUICE_CACHE="$P/rw/cache" "$SLUICE" build -q "$SRC/tests/data/gen_runaway.c" -o "$P/ro/m.h5"
chmod 644 "$P/secret.h5"

# ---------------------------------------------------------------- disk full
# full_disk KB_FREE: a 64 kB tmpfs at $W/full holding old.h5 and a filler
# that leaves KB_FREE kB (root only)
full_disk() {
    mkdir -p "$W/full" && mount -t tmpfs -o size=64k tmpfs "$W/full" 2>/dev/null || return 1
    echo keep >"$W/full/old.h5"
    dd if=/dev/zero of="$W/full/fill" bs=1k count=$((60 - $1)) 2>/dev/null
    return 0
}
if [ "$(id -u)" = 0 ] && full_disk 20; then
    expect "solve: solution larger than the free space (20 kB free)" --code 74 --err "s.h5" \
        --err "not enough free space" --gone "$W/full/s.h5" -- "$SLUICE" solve -q "$W/mid.h5" -o "$W/full/s.h5"
    expect "build: model larger than the free space, previous file kept" --code 74 --err "old.h5" \
        --err "not enough free space" --keep "$W/full/old.h5" -- "$SLUICE" build -q "$SRC/examples/reservoir.c" \
        --param storage_levels=20 --param inflow_classes=3 -o "$W/full/old.h5"
    umount "$W/full"
    full_disk 0
    expect "solve: solution onto a full disk (0 kB free)" --code "73|74" --err "s.h5" --gone "$W/full/s.h5" -- \
        "$SLUICE" solve -q "$G" -o "$W/full/s.h5"
    umount "$W/full"
else
    note_fail "disk full" "needs root to mount a small tmpfs (the checkpoint case is in checkpoint_corrupt.sh)"
fi

# Another program fills the disk while sluice writes. stopfill.py runs the
# command with SLUICE_FAULT_STOP=WHEN (the command stops itself, SIGSTOP,
# just before reserving the space of its output, WHEN=reserve, or just after,
# before HDF5 writes anything, WHEN=write), waits until it has stopped, writes
# a filler until the file system is full to the last byte, lets the command
# go on (SIGCONT) and exits with its status (128 + signal if killed). Exit 99:
# the command never stopped (the case tested nothing). No timing involved.
cat >"$W/stopfill.py" <<'PYEOF'
import os, signal, subprocess, sys
when, d, cmd = sys.argv[1], sys.argv[2], sys.argv[3:]
p = subprocess.Popen(cmd, env=dict(os.environ, SLUICE_FAULT_STOP=when))
_, status = os.waitpid(p.pid, os.WUNTRACED)
if not os.WIFSTOPPED(status):
    print("stopfill: the command ended without stopping", file=sys.stderr)
    sys.exit(99)
fd = os.open(os.path.join(d, "filler"), os.O_WRONLY | os.O_CREAT, 0o644)
n = 0
for size in (65536, 512):
    try:
        while True:
            n += os.write(fd, b"\0" * size)
    except OSError:
        pass
os.close(fd)
st = os.statvfs(d)
print("stopfill: filled %d bytes, %d bytes free" % (n, st.f_bavail * st.f_frsize), file=sys.stderr)
os.kill(p.pid, signal.SIGCONT)
rc = p.wait()
sys.exit(128 - rc if rc < 0 else rc)
PYEOF
# fill_case: a fresh 24 MB tmpfs at $W/fill with old.h5 (a valid model) in it
fill_case() {
    umount "$W/fill" 2>/dev/null
    mkdir -p "$W/fill" && mount -t tmpfs -o size=24m tmpfs "$W/fill" 2>/dev/null || return 1
    cp "$G" "$W/fill/old.h5" && cp "$W/good_sol.h5" "$W/fill/old_sol.h5"
}
MIDGEN=("$SRC/examples/reservoir.c" --param storage_levels=200 --param inflow_classes=8)
if [ "$(id -u)" = 0 ] && fill_case; then
    # sluice reserves the file's space before writing (fallocate): the writes
    # cannot fail, the new model is complete
    expect "build: another program fills the disk while the model is written (space reserved first)" --code 0 \
        --clean "$W/fill/old.h5" -- "$PY" "$W/stopfill.py" write "$W/fill" \
        "$SLUICE" build -q "${MIDGEN[@]}" -o "$W/fill/old.h5"
    expect "info: the model written while the disk filled up is complete" --code 0 --out "19200" -- \
        "$SLUICE" info "$W/fill/old.h5"
    # the disk fills between the free-space check and the reservation
    fill_case
    expect "build: the disk fills before sluice could reserve its space" --code 74 --err "old.h5" \
        --err "not enough free space to reserve" --keep "$W/fill/old.h5" -- \
        "$PY" "$W/stopfill.py" reserve "$W/fill" "$SLUICE" build -q "${MIDGEN[@]}" -o "$W/fill/old.h5"
    # a file system without fallocate (SLUICE_FAULT_NO_RESERVE=1): the writes
    # fail mid-file; HDF5 1.10 used to crash at exit here (exit 139)
    fill_case
    expect "build: disk filled mid-write, no reservation possible" --code 74 --err "old.h5" --err "disk full" \
        --keep "$W/fill/old.h5" -- env SLUICE_FAULT_NO_RESERVE=1 \
        "$PY" "$W/stopfill.py" write "$W/fill" "$SLUICE" build -q "${MIDGEN[@]}" -o "$W/fill/old.h5"
    fill_case
    expect "solve: disk filled mid-write of the solution, no reservation possible" --code 74 --err "old_sol.h5" \
        --err "disk full" --keep "$W/fill/old_sol.h5" -- env SLUICE_FAULT_NO_RESERVE=1 \
        "$PY" "$W/stopfill.py" write "$W/fill" "$SLUICE" solve -q "$W/mid.h5" -o "$W/fill/old_sol.h5"
    expect "verify: the solution kept is still the valid old one" --code 0 -- \
        "$SLUICE" verify -q "$G" "$W/fill/old_sol.h5"
    umount "$W/fill"
else
    note_fail "disk filled during a write" "needs root to mount a small tmpfs"
fi

# ---------------------------------------------------------------- out of memory
# 1.5 GB of address space: enough to start, not for 2^33 doubles of values
expect "solve: out of memory (ulimit -v, n_states 2^33 claimed)" --code "65|71" --gone "$S" -- \
    bash -c "ulimit -v 1500000; exec \"\$0\" solve -q \"\$1\" -o \"\$2\"" "$SLUICE" "$W/n_states_huge.h5" "$S"
"$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=400 --param inflow_classes=10 -o "$W/big.h5"
expect "solve: out of memory (ulimit -v 600 MB, a 48,000-state model)" --code 71 --err "memory" --gone "$S" -- \
    bash -c "ulimit -v 600000; exec \"\$0\" solve -q \"\$1\" -o \"\$2\" --method pi --direct-time-limit 0" "$SLUICE" "$W/big.h5" "$S"

# ---------------------------------------------------------------- generators
R=$SRC/tests/data/gen_runaway.c
expect "build: the runaway test generator in its valid mode" --code 0 -- "$SLUICE" build -q "$R" -o "$W/run0.h5"
expect "build: a generator that emits 10^9 successors for one pair" --code 65 --err "state 2, action 1" \
    --err "more than" --gone "$W/run1.h5" -- "$SLUICE" build -q "$R" --param mode=1 -o "$W/run1.h5"
# an endless loop: the user stops it; it must say where it was, write nothing
cp "$W/run0.h5" "$W/run2.h5"
"$SLUICE" build -q "$R" --param mode=2 -o "$W/run2.h5" >"$W/run2.out" 2>"$W/run2.err" &
pid=$!
for _ in $(seq 1 6000); do grep -q "runaway: looping" "$W/run2.err" && break; sleep 0.05; done
kill -TERM "$pid"
wait "$pid"
rc=$?
if [ $rc -eq 65 ] && grep -q "stopped (signal 15) while generating state 2, action 1" "$W/run2.err" &&
    cmp -s "$W/run0.h5" "$W/run2.h5" && [ -z "$(_sl_leftovers "$W/run2.h5")" ]; then
    note_ok "build: a generator in an endless loop, stopped with SIGTERM: exit 65 naming state 2, action 1; the previous file kept"
else
    note_fail "build: a generator in an endless loop, stopped with SIGTERM" "exit $rc; $(tail -n 2 "$W/run2.err" | tr '\n' ' ')"
fi

# ---------------------------------------------------------------- signal during start-up
# `solve` catches TERM, INT, USR2 (stop) and USR1 (checkpoint) from the first
# line of main(), before MPI_Init and the model load. pending.py starts the
# command with the signal blocked and already pending, so it is delivered the
# moment sluice installs its handlers: a signal "during start-up" at a known
# point, without timing. Stop signals: exit 75, the program's own line
# "arrived during start-up ... stopped before the first iteration", no
# solution, the checkpoint directory untouched.
cat >"$W/pending.py" <<'PYEOF'
import os, signal, sys
sig = getattr(signal, "SIG" + sys.argv[1])
only = os.environ.get("PENDING_RANK")          # under mpirun: that rank only
if only is None or os.environ.get("OMPI_COMM_WORLD_RANK") == only:
    signal.pthread_sigmask(signal.SIG_BLOCK, [sig])
    os.kill(os.getpid(), sig)
os.execvp(sys.argv[2], sys.argv[2:])
PYEOF
"$SLUICE" solve -q "$G" -o "$W/su_first.h5" --checkpoint "$W/su_ck" --max-iterations 2 >/dev/null 2>&1
ck=$(ls "$W"/su_ck/ckpt-*.h5 2>/dev/null | tail -n 1)
[ -n "$ck" ] || note_fail "setup: a checkpoint to resume from" "none in $W/su_ck"
for sig in TERM INT USR2; do
    num=$(kill -l "$sig")
    expect "solve --resume: SIG$sig pending at start-up (before MPI_Init)" --code 75 \
        --err "signal $num ($sig) arrived during start-up, before the model was loaded" \
        --err "stopped before the first iteration" --gone "$W/su_out.h5" --keep "$ck" -- \
        "$PY" "$W/pending.py" "$sig" "$SLUICE" solve "$G" -o "$W/su_out.h5" --checkpoint "$W/su_ck" --resume
done
# USR1 asks for a checkpoint and the run goes on: the solver's own log says
# when it acted on it (the first sweep boundary), and the run finishes
expect "solve: SIGUSR1 pending at start-up: checkpoint at the first boundary, then on to the end" --code 0 \
    --err "signal 10 (USR1) arrived at" --err "acted on at the sweep boundary" -- \
    "$PY" "$W/pending.py" USR1 "$SLUICE" solve "$G" -o "$W/su_usr1.h5" --checkpoint "$W/su_ck1"
# two ranks, only rank 1 got the signal: both stop, one line
if [ -n "${SLUICE_MPIEXEC:-}" ]; then
    expect "solve on 2 ranks: SIGTERM pending at start-up on rank 1 only" --code 75 \
        --err "signal 15 (TERM) arrived during start-up" --gone "$W/su_np2.h5" -- \
        env PENDING_RANK=1 "$SLUICE_MPIEXEC" -np 2 --oversubscribe -x PENDING_RANK \
        "$PY" "$W/pending.py" TERM "$SLUICE" solve "$G" -o "$W/su_np2.h5"
    n=$(grep -c "arrived during start-up" "$W/.last.stderr")
    [ "$n" = 1 ] && note_ok "2 ranks: the start-up stop is reported once" ||
        note_fail "2 ranks: the start-up stop is reported once" "$n lines"
else
    note_fail "solve on 2 ranks: SIGTERM at start-up" "no mpirun (SLUICE_MPIEXEC)"
fi

# SIGTERM at 6 moments of the first 0.3 s (by the wall clock: which phase
# each lands in varies with the machine's load, every outcome below is
# correct): exit 75 with the program's own line (start-up, or the solver's
# "acted on"), or 0 (finished first); 143 only with nothing on stderr (the
# dynamic loader's time before main(), when no handler can exist yet).
# Never a solution after a stop, never an invalid checkpoint, no temporary.
n_early=0 n75=0 n_start=0 bad=0
for d in 0 0.01 0.05 0.1 0.2 0.3; do
    rm -rf "$W/su" "$W/su.h5"
    "$SLUICE" solve "$W/mid.h5" -o "$W/su.h5" --checkpoint "$W/su" --progress-every 1000 >"$W/su.log" 2>&1 &
    pid=$!
    sleep "$d"
    kill -TERM "$pid" 2>/dev/null
    wait "$pid"
    rc=$?
    case $rc in
        75)
            n75=$((n75 + 1))
            if grep -q "arrived during start-up" "$W/su.log"; then
                n_start=$((n_start + 1))
                [ -e "$W/su.h5" ] && { bad=$((bad + 1)); echo "# start-up stop after $d s left su.h5"; }
            elif ! grep -q "acted on at the sweep boundary" "$W/su.log"; then
                bad=$((bad + 1)); echo "# exit 75 after $d s without the program's account of the signal"
            fi ;;
        143)
            n_early=$((n_early + 1))
            [ -s "$W/su.log" ] && { bad=$((bad + 1)); echo "# killed (143) after $d s although main() had run: $(head -n 1 "$W/su.log")"; }
            [ -e "$W/su.h5" ] && { bad=$((bad + 1)); echo "# killed after $d s left su.h5"; } ;;
        0) ;; # finished before the signal
        *) bad=$((bad + 1)); echo "# start-up signal after $d s: exit $rc: $(tail -n 1 "$W/su.log")" ;;
    esac
    for f in "$W"/su/ckpt-*.h5; do
        [ -e "$f" ] || continue
        "$SLUICE" info "$f" >/dev/null 2>&1 || { bad=$((bad + 1)); echo "# $f is not readable"; }
    done
    [ -z "$(ls -a "$W/su" 2>/dev/null | grep partial)" ] || { bad=$((bad + 1)); echo "# a temporary was left in su/"; }
done
if [ $bad -eq 0 ]; then
    note_ok "SIGTERM at 6 moments of start-up: $n75 x exit 75 ($n_start before the first iteration), $n_early x killed before main(); no stray file"
else
    note_fail "SIGTERM during start-up" "$bad problems"
fi

sl_finish
