#!/bin/bash
# direct_stop.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# Policy iteration's direct (UMFPACK) evaluation can be long; a stop request
# must not wait for it. Checked, from sluice's own log and files (no wall
# clock assertions):
#   * SIGTERM sent while a factorization runs (after the log line announcing
#     it) abandons it: the log says "direct solve abandoned", the exit code
#     is 75, a checkpoint is written, no process is left behind, and a
#     --resume run certifies (verify exit 0);
#   * the same with SIGUSR2 under mpirun -np 2 (the factorization runs
#     under rank 0);
#   * the time guard: when UMFPACK's flop estimate of a policy's
#     factorization exceeds the 120 s guard, the factorization is not
#     started, the warning "evaluating iteratively from now on" appears
#     once, and no analysis is logged after it (the solver stays iterative
#     instead of re-analysing every policy).

. "$(dirname "$0")/lib_ckpt.sh"
ck_init "$@"

"$SLUICE" build "$SRC/examples/reservoir.c" --param storage_levels=200 --param inflow_classes=10 -o res.h5 -q ||
    ck_not_ok "build the reservoir"

# run_and_stop NAME SIGNAL LAUNCH...: start a pi solve, wait for the
# announcement of the second factorization (the first policy's is tiny),
# send SIGNAL
run_and_stop() {
    local name=$1 sig=$2 pid i
    shift 2
    rm -rf "ck-$name"
    mkdir "ck-$name"
    "$@" solve res.h5 -o "$name.h5" --method pi --checkpoint "ck-$name" >"$name.log" 2>&1 &
    pid=$!
    for i in $(seq 1 1200); do
        [ "$(grep -c 'evaluate: UMFPACK (' "$name.log")" -ge 2 ] && break
        kill -0 $pid 2>/dev/null || break
        sleep 0.1
    done
    sleep 0.3
    kill -"$sig" $pid 2>/dev/null
    wait $pid
    echo $?
}

rc=$(run_and_stop one TERM "$SLUICE")
ck_rc "pi on 1 rank stopped by SIGTERM during a factorization" 75 "$rc" one.log
if grep -q "direct solve abandoned" one.log; then
    ck_ok "1 rank: the factorization was abandoned ($(grep -o 'abandoned after [0-9.]* s' one.log))"
else
    ck_not_ok "1 rank: no 'direct solve abandoned' in the log" "$(tail -n 4 one.log | tr '\n' ' ')"
fi
ls ck-one/ckpt-*.h5 >/dev/null 2>&1 && ck_ok "1 rank: checkpoint written" || ck_not_ok "1 rank: no checkpoint"
if pgrep -f "res.h5 -o one.h5" >/dev/null; then ck_not_ok "1 rank: a process is left behind"; else ck_ok "1 rank: no process left behind"; fi
"$SLUICE" solve res.h5 -o one.h5 --method pi --checkpoint ck-one --resume -q >resume.log 2>&1
ck_rc "1 rank: --resume certifies" 0 $? resume.log
ck_check "1 rank: verify the resumed solution" "$SLUICE" verify res.h5 one.h5

ck_mpi_init
# mpirun forwards USR2 to the ranks (a TERM to mpirun ends the job itself)
rc=$(run_and_stop two USR2 "$MPIEXEC" -np 2 "${MPIFLAGS[@]}" "$SLUICE")
ck_rc "pi on 2 ranks stopped by SIGUSR2 (sent to mpirun) during a factorization" 75 "$rc" two.log
if grep -q "direct solve abandoned" two.log; then
    ck_ok "2 ranks: the factorization was abandoned"
else
    ck_not_ok "2 ranks: no 'direct solve abandoned' in the log" "$(tail -n 4 two.log | tr '\n' ' ')"
fi
sleep 0.5
if pgrep -f "res.h5 -o two.h5" >/dev/null; then ck_not_ok "2 ranks: a process is left behind"; else ck_ok "2 ranks: no process left behind"; fi

# time guard: on the 48,000-state reservoir the second policy's UMFPACK flop
# estimate is about 1.9e11, 185 s at the assumed 1e9 flop/s (the first
# policy's 2e8 is too small to calibrate the rate), over the 120 s guard;
# deterministic, since the estimate depends on the pattern only
"$SLUICE" build "$SRC/examples/reservoir.c" --param storage_levels=400 --param inflow_classes=10 -o res48.h5 -q ||
    ck_not_ok "build the 48,000-state reservoir"
"$SLUICE" solve res48.h5 -o guard.h5 --method pi --max-iterations 4 >guard.log 2>&1
rc=$?
if [ $rc = 0 ] || [ $rc = 75 ]; then ck_ok "time guard run ends normally (exit $rc)"; else ck_not_ok "time guard run: exit $rc"; fi
n_warn=$(grep -c "evaluating iteratively from now on" guard.log)
after=$(awk '/evaluating iteratively from now on/ {seen = 1; next} seen && /evaluate: UMFPACK \(/ {n++} END {print n + 0}' guard.log)
if [ "$n_warn" = 1 ] && [ "$after" = 0 ]; then
    ck_ok "time guard: one warning, no analysis after it ($(grep -o 'about [0-9]* s (UMFPACK' guard.log | head -1))"
else
    ck_not_ok "time guard" "$n_warn warnings, $after analyses after the first; $(grep -E 'UMFPACK|warning' guard.log | tail -n 3 | tr '\n' ' ')"
fi
ck_finish
