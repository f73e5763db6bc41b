#!/bin/bash
# checkpoint_kill.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# Kill -9 at random moments, resume, and compare with an uninterrupted run.
#
# For each of three methods (Gauss-Seidel and modified policy iteration in
# natural order, Jacobi) an uninterrupted reference solve is run and timed.
# Then each trial starts `solve --checkpoint DIR --resume --checkpoint-every
# 0.05`, kills it with SIGKILL after a random delay (seeded: SLUICE_TEST_SEED),
# and repeats that a few times before a last run to completion. After every
# kill each file named ckpt-*.h5 in DIR must be a complete checkpoint whose
# checksums (recomputed in Python) match, and a few kills are aimed at the
# moment a new checkpoint file name appears in DIR (the temporary of a write
# in progress), so they land inside a write.
# The final /value and /policy must be bitwise equal to the reference's, and
# no temporary of a killed run may be left in DIR after the final run.
#
# Settings: SLUICE_KILL_TRIALS (default 21), SLUICE_KILLS_PER_TRIAL (3).

. "$(dirname "$0")/lib_ckpt.sh"
ck_init "$@"

trials=${SLUICE_KILL_TRIALS:-21}
kills=${SLUICE_KILLS_PER_TRIAL:-3}
tol=1e-6
echo "# seed $CK_SEED, $trials trials, up to $kills kills each"

ck_build_reservoir m.h5 || { ck_not_ok "build the reservoir model"; ck_finish; }

methods=("gs --order natural" "jacobi" "mpi --order natural")
declare -a ref_ms
for i in "${!methods[@]}"; do
    t0=$EPOCHREALTIME
    # shellcheck disable=SC2086
    "$SLUICE" solve m.h5 -o "ref$i.h5" --method ${methods[$i]} --tolerance $tol >"ref$i.log" 2>&1
    rc=$?
    secs=$(ck_since "$t0")
    ref_ms[$i]=$(awk -v s="$secs" 'BEGIN { printf "%d", s * 1000 }')
    ck_rc "reference solve, method ${methods[$i]} (${secs} s)" 0 $rc "ref$i.log"
done

n_kills=0 n_in_write=0 n_early=0 n_resumed=0 n_same=0 n_invalid=0 n_aimed=0

# aim_kill PID DIR LIMIT_S: SIGKILL PID as soon as a checkpoint file name that
# was not in DIR before appears there: normally the temporary of a write in
# progress (a busy loop over globs; no process is started per test)
aim_kill() {
    local pid=$1 dir=$2 f now
    local -A seen=()
    local end=$(($(ck_us) + $3 * 1000000))
    for f in "$dir"/.ckpt-*.partial "$dir"/ckpt-*.h5; do seen[$f]=1; done
    while kill -0 "$pid" 2>/dev/null; do
        for f in "$dir"/.ckpt-*."$pid".partial "$dir"/ckpt-*.h5; do
            if [ -e "$f" ] && [ -z "${seen[$f]:-}" ]; then
                kill -9 "$pid"
                return 0
            fi
        done
        now=${EPOCHREALTIME//[.,]/}
        [ $((10#$now)) -lt $end ] || break
    done
    kill -9 "$pid" 2>/dev/null
    return 1
}

for t in $(seq 1 "$trials"); do
    i=$(((t - 1) % ${#methods[@]}))
    m=${methods[$i]}
    dir=t$t/ckpt
    mkdir -p "t$t"
    trial_ok=1
    delays=""
    for k in $(seq 1 "$kills"); do
        log=t$t/run$k.log
        # shellcheck disable=SC2086
        "$SLUICE" solve m.h5 -o "t$t/sol.h5" --method $m --tolerance $tol --checkpoint "$dir" --resume \
            --checkpoint-every 0.05 --progress-every 1000 >"$log" 2>&1 &
        pid=$!
        # every second trial aims its second kill at a checkpoint write
        if [ $((t % 2)) -eq 0 ] && [ "$k" -eq 2 ]; then
            aim_kill "$pid" "$dir" 10 && n_aimed=$((n_aimed + 1))
            delays="$delays aimed"
        else
            ms=$(ck_rand_ms 50 "${ref_ms[$i]}")
            delays="$delays ${ms}ms"
            sleep "$(ck_ms_to_s "$ms")"
            kill -9 "$pid" 2>/dev/null
        fi
        { wait "$pid"; } 2>/dev/null # no "Killed" line from the shell
        rc=$?
        [ "$k" -gt 1 ] && grep -q "resumed at iteration" "$log" && n_resumed=$((n_resumed + 1))
        if [ $rc -eq 0 ]; then
            n_early=$((n_early + 1)) # finished before the kill
            break
        fi
        n_kills=$((n_kills + 1))
        if [ $rc -ne 137 ]; then
            ck_not_ok "trial $t kill $k: exit $rc, expected 137 (SIGKILL)"
            tail -n 5 "$log" | sed 's/^/#   /'
            trial_ok=0
        fi
        res=$(ck_tool validate "$dir" "$pid")
        vrc=$?
        case $res in *" mine 0"*) ;; *) n_in_write=$((n_in_write + 1)) ;; esac
        if [ $vrc -ne 0 ]; then
            n_invalid=$((n_invalid + 1))
            trial_ok=0
            ck_not_ok "trial $t kill $k: a file named ckpt-*.h5 is not a valid checkpoint" "$(echo "$res" | tr '\n' ' ')"
        fi
    done
    log=t$t/final.log
    # shellcheck disable=SC2086
    "$SLUICE" solve m.h5 -o "t$t/sol.h5" --method $m --tolerance $tol --checkpoint "$dir" --resume \
        --checkpoint-every 0.05 --progress-every 1000 >"$log" 2>&1 &
    pid=$!
    ck_wait "$pid" 600 # a hang limit only
    rc=$?
    if [ $rc -ne 0 ]; then
        ck_not_ok "trial $t ($m, kills at$delays): final resumed run exit $rc, expected 0"
        tail -n 5 "$log" | sed 's/^/#   /'
        continue
    fi
    left=0
    for f in "$dir"/.*.partial; do [ -e "$f" ] && left=$((left + 1)); done
    if [ "$left" -ne 0 ]; then
        ck_not_ok "trial $t: $left temporaries of killed runs are still in $dir after the final run"
        trial_ok=0
    fi
    newest=$(ck_newest_ckpt "$dir")
    if [ -n "$newest" ] && ! why=$(ck_info_complete "$newest"); then
        ck_not_ok "trial $t: sluice info on the newest checkpoint" "$why"
        trial_ok=0
    fi
    if cmp_out=$(ck_tool same "ref$i.h5" "t$t/sol.h5"); then
        n_same=$((n_same + 1))
        [ $trial_ok -eq 1 ] && ck_ok "trial $t ($m, kills at$delays): checkpoints valid after every kill; final result bitwise equal to the reference"
    else
        ck_not_ok "trial $t ($m, kills at$delays): final result differs from the reference" "$cmp_out"
    fi
done

echo "# $trials trials: $n_kills kills ($n_in_write left a temporary of a checkpoint being written, $n_aimed aimed at a write)," \
    "$n_early runs finished before their kill, $n_resumed restarts resumed from a checkpoint;" \
    "$n_invalid invalid ckpt files seen; $n_same of $trials final results bitwise equal"
if [ "$n_in_write" -gt 0 ]; then
    ck_ok "at least one kill landed inside a checkpoint write ($n_in_write)"
else
    ck_not_ok "no kill landed inside a checkpoint write: the test did not exercise that case"
fi
if [ "$n_resumed" -gt 0 ]; then
    ck_ok "restarts resumed from checkpoints ($n_resumed)"
else
    ck_not_ok "no restart resumed from a checkpoint: the test did not exercise resume"
fi
ck_finish
