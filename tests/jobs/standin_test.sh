#!/bin/bash
# standin_test.sh SLUICE_BIN MODEL_FILE WORKDIR
#
# Runs jobs/slurm/sluice-solve.sbatch outside Slurm, in a stand-in for a Slurm
# job: SLURM_* variables are set, a fake `scontrol` on PATH records requeue
# requests, a fake `squeue` answers the remaining-time query, and this driver
# delivers signals the way Slurm does (the warning signal, read from the
# script's `#SBATCH --signal=B:...` line, to the batch shell only; at the
# time limit SIGTERM to every process of the job, then SIGKILL after a grace
# period).  A "requeue" is emulated by running the script again
# with SLURM_RESTART_COUNT increased.
#
# Scenarios
#   reference   uninterrupted solve under the same launcher: its iteration
#               count I sets the work per run
#   chain       warning signal in every run once the solver has logged
#               K = ceil(I/3) iterations beyond the one it resumed at: each
#               run must checkpoint, exit 75 and request a requeue; the chain
#               must converge within ceil(I/K)+1 runs, and the result must
#               agree with the reference within the tolerance
#   limit       SLUICE_MAX_RESTARTS=1: the second stop must not requeue
#   checkpoint-now  SIGUSR1 to the batch shell: a checkpoint appears while
#               sluice keeps running (the default --checkpoint-every is long)
#   term        SIGTERM to all processes with no warning (preemption), then a
#               run that resumes to the end
#   walltime    no signal at all; the remaining time reported by squeue (and
#               then by SLURM_JOB_END_TIME) must reach sluice as
#               SLUICE_WALLTIME and make it stop with 75
#   errors      missing model and a corrupt model: no requeue, exit code kept
#
# Signals are sent when the solver's own log shows the state they are meant to
# hit (its header line: handlers installed; its progress lines: iterations
# done; a checkpoint file), never at a fixed wall-clock moment, so a busy
# machine only makes the test slower. Time limits only catch a hang.
#
# Exit 0 pass, 1 fail (also when a prerequisite is missing; the reason is
# printed).  Settings (environment):
#   SLUICE_TEST_LAUNCHER   mpirun | none    [mpirun if found, else none]
#   SLUICE_TEST_RANKS      ranks for mpirun [2]
#   SLUICE_TEST_TOLERANCE  --tolerance for every solve [1e-6]
#   SLUICE_TEST_KILLWAIT   seconds between SIGTERM and SIGKILL [10]
#   SLUICE_JOB_SCRIPT      script under test [jobs/slurm/sluice-solve.sbatch]

# Multi-part checks are passed to `check` as single-quoted strings for eval.
# shellcheck disable=SC2016,SC2034

set -u

if [ $# -ne 3 ]; then
    echo "usage: $0 SLUICE_BIN MODEL_FILE WORKDIR" >&2
    exit 64
fi

# every prerequisite is installed by tools/setup: a missing one fails the test
prereq_fail() { echo "FAIL: missing prerequisite: $*"; exit 1; }

here=$(cd "$(dirname "$0")" && pwd)
job_script="${SLUICE_JOB_SCRIPT:-$here/../../jobs/slurm/sluice-solve.sbatch}"
bin=$1
model=$2
W=$3

case "$bin" in /*) ;; *) bin="$PWD/$bin" ;; esac
case "$model" in /*) ;; *) model="$PWD/$model" ;; esac

# ---- prerequisites -------------------------------------------------------------

[ -f "$job_script" ] || prereq_fail "job script not found: $job_script"
[ -x "$bin" ] || prereq_fail "sluice binary not executable: $bin"
[ -r "$model" ] || prereq_fail "model file not readable: $model"
for tool in setsid ps awk; do
    command -v "$tool" >/dev/null 2>&1 || prereq_fail "'$tool' is not installed"
done
[ -n "${EPOCHREALTIME:-}" ] || prereq_fail "bash 5 or newer is needed (EPOCHREALTIME)"
help=$("$bin" solve --help 2>&1)
case "$help" in
    *--checkpoint*) ;;
    *) prereq_fail "'sluice solve --help' does not mention --checkpoint: checkpoints not supported by this build" ;;
esac

py=""
for cand in "${PYTHON:-}" python3 /usr/bin/python3; do
    [ -n "$cand" ] || continue
    if "$cand" -c 'import h5py, numpy' >/dev/null 2>&1; then py=$cand; break; fi
done
if [ -z "$py" ] && ! command -v h5dump >/dev/null 2>&1; then
    prereq_fail "neither python3 with h5py nor h5dump is available to read solution files"
fi

launcher="${SLUICE_TEST_LAUNCHER:-}"
if [ -z "$launcher" ]; then
    if command -v mpirun >/dev/null 2>&1; then launcher=mpirun; else launcher=none; fi
fi
ranks="${SLUICE_TEST_RANKS:-2}"
tol="${SLUICE_TEST_TOLERANCE:-1e-6}"
killwait="${SLUICE_TEST_KILLWAIT:-10}"
largs=""
if [ "$launcher" = mpirun ]; then
    if mpirun --version 2>&1 | grep -q "Open MPI"; then
        largs="--oversubscribe"
        if [ "$(id -u)" = 0 ]; then
            export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
        fi
    fi
fi

# The warning signal the script asks Slurm for (#SBATCH --signal=B:SIG@SECONDS)
warn_sig=$(sed -n 's/^#SBATCH --signal=B:\([A-Z0-9]*\)@.*/\1/p' "$job_script" | head -n 1)
warn_sig=${warn_sig#SIG}
[ -n "$warn_sig" ] || prereq_fail "no '#SBATCH --signal=B:SIG@SECONDS' line in $job_script"

# ---- stand-in Slurm environment ---------------------------------------------------

mkdir -p "$W" || exit 1
W=$(cd "$W" && pwd)
rm -rf "$W/fakebin" "$W/runs"
mkdir -p "$W/fakebin" "$W/runs"
cat >"$W/fakebin/scontrol" <<'EOF'
#!/bin/sh
# stand-in scontrol: records its arguments
echo "$*" >>"$SLUICE_TEST_SCONTROL_LOG"
case "$1" in
    requeue) exit "${SLUICE_TEST_SCONTROL_RC:-0}" ;;
esac
exit 0
EOF
cat >"$W/fakebin/squeue" <<'EOF'
#!/bin/sh
# stand-in squeue: answers the remaining-time query (-o %L)
echo "$*" >>"$SLUICE_TEST_SQUEUE_LOG"
echo "${SLUICE_TEST_SQUEUE_LEFT:-UNLIMITED}"
EOF
chmod +x "$W/fakebin/scontrol" "$W/fakebin/squeue"

export PATH="$W/fakebin:$PATH"
export SLUICE_TEST_SCONTROL_LOG="$W/scontrol.log"
export SLUICE_TEST_SQUEUE_LOG="$W/squeue.log"
: >"$SLUICE_TEST_SCONTROL_LOG"
: >"$SLUICE_TEST_SQUEUE_LOG"
jobid=4242
export SLURM_JOB_ID=$jobid SLURM_JOB_NAME=sluice-solve SLURM_NTASKS=$ranks
unset SLURM_RESTART_COUNT SLURM_JOB_END_TIME SLUICE_WALLTIME SLUICE_OUTPUT SLUICE_CHECKPOINT_DIR SLUICE_REPORT \
    SLUICE_METHOD SLUICE_CHECKPOINT_EVERY SLUICE_SOLVE_ARGS SLUICE_MAX_RESTARTS SLUICE_WALLTIME_MARGIN
export SLUICE_BIN="$bin" SLUICE_MODEL="$model" SLUICE_LAUNCHER="$launcher" \
    SLUICE_LAUNCHER_ARGS="$largs" SLUICE_RANKS="$ranks" SLUICE_TOLERANCE="$tol"
# a progress line at every check, so the driver can follow the iterations
export SLUICE_SOLVE_ARGS="--progress-every 0.000001"

passed=0
failed=0
pass() { passed=$((passed + 1)); echo "PASS: $*"; }
fail() { failed=$((failed + 1)); echo "FAIL: $*"; }
check() { # check DESCRIPTION COMMAND...
    local what=$1
    shift
    if "$@"; then pass "$what"; else fail "$what"; fi
}

now_ms() { local t=${EPOCHREALTIME/[.,]/}; echo $((t / 1000)); }

# pid and all its descendants
tree() {
    ps -e -o pid= -o ppid= | awk -v r="$1" '
        { par[$1] = $2 }
        END {
            keep[r] = 1; more = 1
            while (more) { more = 0; for (p in par) if (!(p in keep) && (par[p] in keep)) { keep[p] = 1; more = 1 } }
            for (p in keep) print p
        }'
}
signal_tree() { # signal_tree SIG PID: like Slurm, signal every process of the job
    local p
    for p in $(tree "$2"); do kill -s "$1" "$p" 2>/dev/null; done
}

live_jobs=""
cleanup() {
    local p
    for p in $live_jobs; do
        kill -0 "$p" 2>/dev/null && signal_tree KILL "$p"
    done
}
trap cleanup EXIT

# wait_until PID DEADLINE_MS: poll until PID exits or the deadline passes
wait_until() {
    while kill -0 "$1" 2>/dev/null && [ "$(now_ms)" -lt "$2" ]; do sleep 0.05; done
    ! kill -0 "$1" 2>/dev/null
}

# When a signal is sent, from the run's own log (RUN_LOG):
#   -       never
#   hdr     sluice's header line is there (signal handlers installed)
#   +K      sluice has logged a progress line of iteration >= S + K, where S
#           is the iteration it resumed at (0 for a fresh start)
#   ckpt    the checkpoint directory holds a file
#   SECONDS a plain number: that many seconds after the start (a hang limit)
# reached PID SPEC T0_MS: wait until SPEC holds or PID ends; 0 if SPEC holds
# (and PID is still running)
reached() {
    local pid=$1 spec=$2 t0=$3 start it
    while kill -0 "$pid" 2>/dev/null; do
        case $spec in
            -) ;;
            hdr) grep -Eq "solve: .*, [0-9]+ rank\(s\), tolerance" "$RUN_LOG" && return 0 ;;
            +*)
                start=$(sed -n 's/.*solve: resumed at iteration \([0-9]*\),.*/\1/p' "$RUN_LOG" | tail -n 1)
                it=$(sed -n 's/.*solve: iter \([0-9]*\) .*/\1/p' "$RUN_LOG" | tail -n 1)
                [ -n "$it" ] && [ "$it" -ge $((${start:-0} + ${spec#+})) ] && return 0 ;;
            ckpt) has_files "$SLURM_SUBMIT_DIR/checkpoints" && return 0 ;;
            *) [ "$(now_ms)" -ge $((t0 + $(ms "$spec"))) ] && return 0 ;;
        esac
        sleep 0.05
    done
    return 1
}

# run_job NAME RESTARTS CKPT WARN TERM: run the job script once in the
# stand-in environment; CKPT, WARN, TERM as above (TERM "-" means the hang
# limit $hang).  CKPT: SIGUSR1 (checkpoint now) to the batch shell.  WARN: the
# warning signal to the batch shell only, as `--signal=B:...`.  TERM: SIGTERM
# to all processes of the job, SIGKILL $killwait s later, as at the time limit.
# Sets RUN_RC RUN_MS RUN_WARNED RUN_TERMED RUN_KILLED RUN_LOG, and
# RUN_CKPT_BEFORE_WARN=1 if the checkpoint directory had files at WARN.
run_job() {
    local name=$1 restarts=$2 ckpt=$3 warn=$4 term=$5
    RUN_LOG="$W/runs/$name.log"
    RUN_WARNED=0 RUN_TERMED=0 RUN_KILLED=0 RUN_CKPT_BEFORE_WARN=0
    local t0 pid
    [ "$term" != - ] || term=$hang
    t0=$(now_ms)
    (
        if [ "$restarts" -gt 0 ]; then export SLURM_RESTART_COUNT=$restarts; fi
        exec setsid bash "$job_script"
    ) >"$RUN_LOG" 2>&1 </dev/null &
    pid=$!
    live_jobs="$live_jobs $pid"
    if [ "$ckpt" != - ] && reached "$pid" "$ckpt" "$t0"; then
        kill -USR1 "$pid" 2>/dev/null
    fi
    if [ "$warn" != - ] && reached "$pid" "$warn" "$t0"; then
        ! has_files "$SLURM_SUBMIT_DIR/checkpoints" || RUN_CKPT_BEFORE_WARN=1
        kill -s "$warn_sig" "$pid" 2>/dev/null && RUN_WARNED=1
    fi
    if reached "$pid" "$term" "$t0"; then
        signal_tree TERM "$pid"
        RUN_TERMED=1
        if ! wait_until "$pid" $(($(now_ms) + killwait * 1000)); then
            signal_tree KILL "$pid"
            RUN_KILLED=1
        fi
    fi
    wait "$pid"
    RUN_RC=$?
    RUN_MS=$(($(now_ms) - t0))
    echo "  run $name: exit $RUN_RC after ${RUN_MS} ms (warned=$RUN_WARNED term=$RUN_TERMED kill=$RUN_KILLED)"
}

ms() { awk -v s="$1" 'BEGIN { printf "%d", s * 1000 }'; }

requeues() { grep -c "^requeue $jobid\$" "$SLUICE_TEST_SCONTROL_LOG"; }
has_files() { [ -n "$(find "$1" -type f 2>/dev/null | head -n 1)" ]; }
log_has() { grep -q -- "$2" "$1"; }
log_lacks() { ! grep -q -- "$2" "$1"; }

converged() { # converged SOLUTION.h5
    [ -f "$1" ] || return 1
    if [ -n "$py" ]; then
        "$py" - "$1" <<'EOF'
import sys, h5py
with h5py.File(sys.argv[1], "r") as f:
    sys.exit(0 if "converged" in f.attrs and bool(f.attrs["converged"]) else 1)
EOF
    else
        h5dump -a /converged "$1" 2>/dev/null | grep -Eq '\(0\): *(1|TRUE)'
    fi
}

same_values() { # same_values A.h5 B.h5: sup-norm difference within 2*tolerance
    [ -n "$py" ] || { echo "  (python3 with h5py missing: values not compared)"; return 0; }
    "$py" - "$1" "$2" "$tol" <<'EOF'
import sys, h5py, numpy as np
with h5py.File(sys.argv[1], "r") as a, h5py.File(sys.argv[2], "r") as b:
    x = a["value"][...]; y = b["value"][...]
if x.shape != y.shape:
    print("  value shapes differ:", x.shape, y.shape); sys.exit(1)
d = float(np.max(np.abs(x - y))) if x.size else 0.0
limit = 2 * float(sys.argv[3]) + 1e-12 * max(1.0, float(np.max(np.abs(x))) if x.size else 1.0)
print("  max |value - reference value| = %.3g (limit %.3g)" % (d, limit))
sys.exit(0 if d <= limit else 1)
EOF
}

# Fresh run directory for one scenario: the script runs in it (SLURM_SUBMIT_DIR)
scenario() {
    echo "== $1"
    export SLURM_SUBMIT_DIR="$W/$1"
    rm -rf "$SLURM_SUBMIT_DIR"
    mkdir -p "$SLURM_SUBMIT_DIR"
    : >"$SLUICE_TEST_SCONTROL_LOG"
}

echo "job script: $job_script"
echo "sluice: $bin; model: $model; launcher: $launcher${largs:+ $largs}; ranks: $ranks; tolerance: $tol"

# ---- reference ------------------------------------------------------------------

scenario reference
ref_launch=()
if [ "$launcher" = mpirun ]; then
    ref_launch=(mpirun -np "$ranks")
    [ -z "$largs" ] || ref_launch+=("$largs")
fi
t0=$(now_ms)
"${ref_launch[@]}" "$bin" solve "$model" -o "$W/reference/solution.h5" --tolerance "$tol" \
    --checkpoint "$W/reference/checkpoints" >"$W/runs/reference.log" 2>&1 </dev/null
rc=$?
ref_ms=$(($(now_ms) - t0))
echo "  reference solve: exit $rc after $ref_ms ms"
if [ "$rc" != 0 ] || ! converged "$W/reference/solution.h5"; then
    tail -n 20 "$W/runs/reference.log"
    fail "reference solve (uninterrupted) exits 0 with a converged solution"
    echo "$passed passed, $failed failed"
    exit 1
fi
pass "reference solve (uninterrupted) exits 0 with a converged solution"
ref_iters=$(sed -n 's/.*CERTIFIED after \([0-9]*\) iterations.*/\1/p' "$W/runs/reference.log" | tail -n 1)
if [ -z "$ref_iters" ] || [ "$ref_iters" -lt 9 ]; then
    fail "reference: the summary gives ${ref_iters:-no} iterations; the signal scenarios need at least 9"
    echo "$passed passed, $failed failed"
    exit 1
fi
# work per chain run, and the most runs the chain may take
chunk=$(((ref_iters + 2) / 3))
max_runs=$(((ref_iters + chunk - 1) / chunk + 1))
echo "  reference: $ref_iters iterations; the chain warns each run after $chunk more, so at most $max_runs runs"
# hang limit for one run: generous (only a hung run reaches it)
hang=$(awk -v m="$ref_ms" 'BEGIN { g = 20 * m / 1000; if (g < 300) g = 300; printf "%.3f", g }')

# ---- chain: warning, checkpoint, 75, requeue, resume, ..., converged ---------------

scenario chain
export SLUICE_MAX_RESTARTS=8
sol="$W/chain/solution.h5"
runs=0
ok_chain=1
final_rc=""
for restart in $(seq 0 "$SLUICE_MAX_RESTARTS"); do
    run_job "chain-$restart" "$restart" - "+$chunk" -
    runs=$((runs + 1))
    if [ "$RUN_RC" = 75 ]; then
        if [ "$RUN_WARNED" != 1 ] || [ "$RUN_TERMED" != 0 ] || [ "$(requeues)" != "$runs" ] ||
            ! has_files "$W/chain/checkpoints" || ! log_has "$RUN_LOG" "received SIG$warn_sig"; then
            ok_chain=0
            echo "  run $restart: warned=$RUN_WARNED term=$RUN_TERMED requeues=$(requeues) (want $runs)"
            tail -n 15 "$RUN_LOG"
            break
        fi
        continue
    fi
    final_rc=$RUN_RC
    break
done
echo "  chain: $runs runs, $(requeues) requeue requests, final exit ${final_rc:-none}"
check "chain: every stopped run was warned, stopped before the limit, left a checkpoint and requested one requeue" \
    [ "$ok_chain" = 1 ]
check "chain: the first run was interrupted (exit 75) and run 2..$max_runs converged (exit 0)" \
    eval '[ "$runs" -ge 2 ] && [ "$runs" -le "$max_runs" ] && [ "${final_rc:-x}" = 0 ]'
check "chain: the final run did not request a requeue" [ "$(requeues)" = $((runs - 1)) ]
check "chain: runs were started with --checkpoint and --resume" \
    log_has "$W/runs/chain-0.log" "--checkpoint checkpoints --resume"
check "chain: the restart count reached the job script" \
    log_has "$W/runs/chain-1.log" "restart 1\]"
check "chain: solution has /converged set" converged "$sol"
check "chain: values agree with the uninterrupted solve" same_values "$W/reference/solution.h5" "$sol"
check "chain: the squeue query named this job" log_has "$SLUICE_TEST_SQUEUE_LOG" "-j $jobid"

# ---- limit: no requeue once SLURM_RESTART_COUNT reaches SLUICE_MAX_RESTARTS ----------

scenario limit
export SLUICE_MAX_RESTARTS=1
run_job limit-0 0 - "+$chunk" -
rc0=$RUN_RC
q0=$(requeues)
run_job limit-1 1 - "+$chunk" -
rc1=$RUN_RC
check "limit: first run exits 75 and requests a requeue" eval '[ "$rc0" = 75 ] && [ "$q0" = 1 ]'
check "limit: second run (restart 1 of 1) exits 75 without requeueing" eval '[ "$rc1" = 75 ] && [ "$(requeues)" = 1 ]'
check "limit: the log says why" log_has "$RUN_LOG" "restart limit reached"
unset SLUICE_MAX_RESTARTS

# ---- checkpoint-now: SIGUSR1 to the batch shell checkpoints and continues ---------

scenario checkpoint-now
# SIGUSR1 once sluice has installed its handlers, the warning once the
# checkpoint it asked for is there
run_job ckpt-0 0 hdr ckpt -
check "checkpoint-now: SIGUSR1 was forwarded as a checkpoint request" \
    log_has "$RUN_LOG" "received SIGUSR1; sending SIGUSR1"
check "checkpoint-now: a checkpoint existed before the warning, and sluice kept running until it" \
    eval '[ "$RUN_CKPT_BEFORE_WARN" = 1 ] && [ "$RUN_WARNED" = 1 ]'
check "checkpoint-now: the warning then stopped it with 75 and one requeue" \
    eval '[ "$RUN_RC" = 75 ] && [ "$RUN_TERMED" = 0 ] && [ "$(requeues)" = 1 ]'

# ---- term: SIGTERM to every process, no warning (preemption / limit reached) ---------

scenario term
# Under mpirun, SIGTERM reaching mpirun itself kills the ranks about a second
# later, so only the direct launch can be expected to checkpoint on it.
# SIGTERM once sluice has logged some progress (its handlers are installed).
export SLUICE_LAUNCHER=none
run_job term-0 0 - - +1
check "term: SIGTERM without warning gives exit 75 and a requeue request" \
    eval '[ "$RUN_RC" = 75 ] && [ "$RUN_KILLED" = 0 ] && [ "$(requeues)" = 1 ]'
check "term: the batch shell saw SIGTERM" log_has "$RUN_LOG" "received SIGTERM"
check "term: a checkpoint was left" has_files "$W/term/checkpoints"
export SLUICE_LAUNCHER="$launcher"
run_job term-1 1 - - -
check "term: the requeued run resumes and converges" eval '[ "$RUN_RC" = 0 ] && converged "$W/term/solution.h5"'
check "term: values agree with the uninterrupted solve" same_values "$W/reference/solution.h5" "$W/term/solution.h5"

# ---- walltime: squeue's remaining time reaches sluice as SLUICE_WALLTIME -------------

scenario walltime
export SLUICE_WALLTIME_MARGIN=5
# sluice's budget: a sixth of the reference run, at least 1 s (it must stop
# itself before converging; a busy machine only makes that more certain)
left=$(awk -v m="$ref_ms" 'BEGIN { printf "%d", m / 6000 + 5.999 }')
SLUICE_TEST_SQUEUE_LEFT=$(printf '%d:%02d' $((left / 60)) $((left % 60)))
export SLUICE_TEST_SQUEUE_LEFT
run_job walltime-0 0 - - -
check "walltime: SLUICE_WALLTIME=$((left - 5)) was exported" log_has "$RUN_LOG" "after $((left - 5))s (SLUICE_WALLTIME)"
check "walltime: sluice stopped itself with exit 75, no signal needed, requeue requested" \
    eval '[ "$RUN_RC" = 75 ] && [ "$RUN_TERMED" = 0 ] && [ "$(requeues)" = 1 ]'
check "walltime: the script received no signal" log_lacks "$RUN_LOG" "received SIG"
check "walltime: sluice logged the stop as due at $((left - 5)) s minus its margin" \
    grep -Eq "^solve: --walltime $((left - 5))\.000 s: stop due at .* acted on at the sweep boundary" "$RUN_LOG"
unset SLUICE_TEST_SQUEUE_LEFT

scenario walltime-end
# Newer Slurm versions set SLURM_JOB_END_TIME; it takes precedence over squeue.
SLURM_JOB_END_TIME=$(($(date +%s) + left)) \
    run_job walltime-end-0 0 - - -
check "walltime-end: SLUICE_WALLTIME derived from SLURM_JOB_END_TIME" \
    grep -Eq "after ($((left - 6))|$((left - 5)))s \(SLUICE_WALLTIME\)" "$RUN_LOG"
check "walltime-end: sluice stopped itself with exit 75 and no signal" \
    eval '[ "$RUN_RC" = 75 ] && [ "$RUN_TERMED" = 0 ] && log_lacks "$RUN_LOG" "received SIG"'
unset SLUICE_WALLTIME_MARGIN

# ---- errors: no requeue on bad input ------------------------------------------------

scenario errors
SLUICE_MODEL="$W/errors/no-such-model.h5" run_job errors-missing 0 - - 60
check "errors: missing model gives exit 66 and no requeue" eval '[ "$RUN_RC" = 66 ] && [ "$(requeues)" = 0 ]'
printf 'this is not an HDF5 file\n' >"$W/errors/corrupt.h5"
SLUICE_MODEL="$W/errors/corrupt.h5" run_job errors-corrupt 0 - - 60
check "errors: corrupt model gives sluice's error code (not 0, not 75) and no requeue" \
    eval '[ "$RUN_RC" != 0 ] && [ "$RUN_RC" != 75 ] && [ "$RUN_TERMED" = 0 ] && [ "$(requeues)" = 0 ]'
check "errors: the log says it is not requeueing" log_has "$RUN_LOG" "not requeueing"

echo "logs: $W/runs"
echo "$passed passed, $failed failed"
[ "$failed" = 0 ]
