#!/bin/bash
# resume_ranks.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# A checkpoint written on 3 ranks resumes on 2, and that one on 1, for every
# method: the run on 3 ranks stops at --max-iterations (a third of the
# iterations an uninterrupted one-rank solve needs) with exit 75, the run on
# 2 ranks resumes from it and stops at two thirds (75), the run on 1 rank
# resumes from that and certifies (exit 0). The final values must be within
# 2*tolerance of the uninterrupted run (both are certified within the
# tolerance of v*), `sluice verify` must accept the result, and each
# checkpoint must record the rank count that wrote it. For gs and jacobi a
# 3-rank run stopped and resumed on 3 ranks must also end bitwise equal to an
# uninterrupted 3-rank run.

. "$(dirname "$0")/../cli/lib_ckpt.sh"
ck_init "$@"
ck_mpi_init

tol=1e-6
ck_build_reservoir m.h5 || { ck_not_ok "build the reservoir model"; ck_finish; }

# run N LOG ARGS...: sluice solve on N ranks (time limit 300 s); status in $rc
run() {
    local n=$1 log=$2
    shift 2
    timeout "$CK_HANG" "$MPIEXEC" -np "$n" "${MPIFLAGS[@]}" "$SLUICE" solve m.h5 --tolerance $tol --progress-every 1000 \
        "$@" >"$log" 2>&1
    rc=$?
}

for m in gs jacobi mpi pi; do
    run 1 "ref-$m.log" -o "ref-$m.h5" --method $m
    if [ $rc -ne 0 ]; then
        ck_not_ok "$m: uninterrupted one-rank solve: exit $rc"
        continue
    fi
    iters=$(ck_tool attr "ref-$m.h5" iterations)
    a=$((iters / 3))
    b=$((2 * iters / 3))
    [ $a -ge 1 ] || a=1
    [ $b -gt $a ] || b=$((a + 1))
    d=ck-$m
    why=()
    run 3 "$m-np3.log" -o "$m-np3.h5" --method $m --checkpoint $d --max-iterations $a
    [ $rc -eq 75 ] || why+=("3 ranks: exit $rc, expected 75")
    c1=$(ck_newest_ckpt $d)
    [ -n "$c1" ] && [ "$(ck_tool attr "$c1" ranks)" = 3 ] && [ "$(ck_tool attr "$c1" iteration)" = $a ] ||
        why+=("3 ranks: no checkpoint of 3 ranks at iteration $a (${c1:-none})")
    run 2 "$m-np2.log" -o "$m-np2.h5" --method $m --checkpoint $d --resume --max-iterations $b
    [ $rc -eq 75 ] || why+=("2 ranks: exit $rc, expected 75")
    grep -q "resumed at iteration $a," "$m-np2.log" || why+=("2 ranks did not resume at iteration $a")
    c2=$(ck_newest_ckpt $d)
    [ -n "$c2" ] && [ "$c2" != "$c1" ] && [ "$(ck_tool attr "$c2" ranks)" = 2 ] ||
        why+=("2 ranks: no new checkpoint of 2 ranks (${c2:-none})")
    run 1 "$m-np1.log" -o "$m-final.h5" --method $m --checkpoint $d --resume
    [ $rc -eq 0 ] || why+=("1 rank: exit $rc, expected 0 (certified)")
    grep -q "resumed at iteration $b," "$m-np1.log" || why+=("1 rank did not resume at iteration $b")
    ck_tool validate $d >/dev/null || why+=("$(ck_tool validate $d | tr '\n' ' ')")
    if [ ${#why[@]} -eq 0 ]; then
        ck_ok "$m: 3 ranks stopped at iteration $a (75), 2 ranks resumed and stopped at $b (75), 1 rank resumed and certified (0)"
        if out=$(ck_tool close m.h5 "ref-$m.h5" "$m-final.h5" "$(awk -v t=$tol 'BEGIN{print 2*t}')" 1e-9); then
            ck_ok "$m: result vs uninterrupted ($iters iterations): $out"
        else
            ck_not_ok "$m: result vs uninterrupted" "$out"
        fi
        if out=$("$SLUICE" verify m.h5 "$m-final.h5" 2>&1); then
            ck_ok "$m: sluice verify accepts the resumed result"
        else
            ck_not_ok "$m: sluice verify rejects the resumed result" "$(echo "$out" | tail -n 2 | tr '\n' ' ')"
        fi
    else
        ck_not_ok "$m: 3 -> 2 -> 1 ranks" "$(printf '%s; ' "${why[@]}")"
        for f in "$m-np3.log" "$m-np2.log" "$m-np1.log"; do
            grep -E "^sluice|warning" "$f" 2>/dev/null | head -n 2 | sed "s/^/#   $f: /"
        done
    fi
done

# same rank count: bitwise equal to the uninterrupted run
for m in gs jacobi; do
    run 3 "same-$m-ref.log" -o "same-$m-ref.h5" --method $m
    r0=$rc
    iters=$(ck_tool attr "same-$m-ref.h5" iterations 2>/dev/null || echo 2)
    run 3 "same-$m-a.log" -o "same-$m-a.h5" --method $m --checkpoint "same-$m" --max-iterations $((iters / 2))
    r1=$rc
    run 3 "same-$m-b.log" -o "same-$m-b.h5" --method $m --checkpoint "same-$m" --resume
    r2=$rc
    if [ $r0 -eq 0 ] && [ $r1 -eq 75 ] && [ $r2 -eq 0 ] && out=$(ck_tool same "same-$m-ref.h5" "same-$m-b.h5"); then
        ck_ok "$m on 3 ranks, stopped at iteration $((iters / 2)) and resumed on 3: bitwise equal to uninterrupted ($out)"
    else
        ck_not_ok "$m on 3 ranks stopped and resumed on 3" "exits $r0 $r1 $r2; ${out:-}"
    fi
done
ck_finish
