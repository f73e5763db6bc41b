#!/bin/bash
# fault_alloc.sh - the N-th checked allocation fails (SLUICE_FAULT_ALLOC=N),
# for every N until the command runs through without reaching the fault:
# import, build, solve (gs with checkpoints, pi), verify, export. Each
# injected failure must give exit 71 with "out of memory allocating" and the
# injected allocation named, no crash, no output file and no temporary, and an
# existing output (or checkpoint) kept byte-identical. In the sanitizer stage
# LeakSanitizer also fails the run on any leak on those error paths.
# usage: bash fault_alloc.sh SLUICE_BINARY WORKDIR SOURCE_DIR [STEP]
# STEP (import, build, solve, pi, verify or export) runs one sweep only; CTest
# registers one test per step (cli_fault_alloc_STEP), so that each sweep's
# hundreds of runs have a timeout of their own and two can run side by side.
# Without STEP every sweep runs.
. "$(dirname "$0")/lib.sh"
step=${4:-all}
case $step in all|import|build|solve|pi|verify|export) ;;
    *) echo "fault_alloc.sh: unknown step '$step'" >&2; exit 64 ;; esac
sl_setup "$1" "$2" "$3"
want() { [ "$step" = all ] || [ "$step" = "$1" ]; }

cat >"$W/ok.csv" <<'CSV'
state,action,next_state,probability,reward
0,0,1,1,2
1,0,0,0.5,1
1,0,1,0.5,1
1,1,2,1,0
2,0,2,1,-1
CSV
G=$W/good.h5
"$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=20 --param inflow_classes=3 -o "$G" ||
    note_fail "setup: model" "build failed"
"$SLUICE" solve -q "$G" -o "$W/good_sol.h5" || note_fail "setup: solution" "solve failed"
"$SLUICE" solve -q "$G" -o "$W/ck_sol.h5" --checkpoint "$W/ck" --max-iterations 3 >/dev/null 2>&1
echo "old" >"$W/old.out"

total=0
# sweep NAME OUT RC -- COMMAND...: inject at N = 1, 2, ... until the command
# exits RC (its fault-free status) without reaching the fault
sweep() {
    local name=$1 out=$2 done_rc=$3 n rc faults=0 bad=0
    shift 4
    for n in $(seq 1 2000); do
        cp "$W/old.out" "$out"
        [ -d "$W/ck" ] && cp -r "$W/ck" "$W/ck.before"
        SLUICE_FAULT_ALLOC=$n "$@" >"$W/f.out" 2>"$W/f.err" </dev/null
        rc=$?
        if [ $rc -eq "$done_rc" ] && ! grep -q "injected failure" "$W/f.err"; then
            break
        fi
        faults=$((faults + 1))
        local why=""
        [ $rc -eq 71 ] || why="$why exit $rc;"
        grep -q "out of memory allocating .*injected failure of allocation $n)" "$W/f.err" || why="$why message;"
        grep -qE "Segmentation|Aborted|core dumped|AddressSanitizer|LeakSanitizer|runtime error" "$W/f.err" &&
            why="$why crash/sanitizer report;"
        cmp -s "$W/old.out" "$out" || why="$why $(basename "$out") changed;"
        [ -z "$(_sl_leftovers "$out")" ] || why="$why temporary left;"
        if [ -d "$W/ck.before" ]; then
            diff -r "$W/ck.before" "$W/ck" >/dev/null 2>&1 || {
                # a new checkpoint may have been written before the fault; the old ones must be unchanged
                for f in "$W"/ck.before/ckpt-*.h5; do
                    [ -e "$f" ] || continue
                    g="$W/ck/$(basename "$f")"
                    [ ! -e "$g" ] || cmp -s "$f" "$g" || why="$why $(basename "$f") changed;"
                done
            }
            rm -rf "$W/ck" && mv "$W/ck.before" "$W/ck"
        fi
        if [ -n "$why" ]; then
            bad=$((bad + 1))
            echo "# $name, allocation $n:$why $(head -c 300 "$W/f.err" | tr '\n' ' ')"
        fi
    done
    total=$((total + faults))
    if [ $bad -eq 0 ] && [ $faults -gt 0 ] && [ $rc -eq "$done_rc" ]; then
        note_ok "$name: $faults allocations failed one at a time, each exit 71 with the message; $(basename "$out") kept"
    else
        note_fail "$name" "$bad of $faults injected failures misbehaved (last exit $rc)"
    fi
}

want import && sweep "import" "$W/m_imp.h5" 0 -- "$SLUICE" import -q "$W/ok.csv" --discount 0.9 -o "$W/m_imp.h5"
want build && sweep "build" "$W/m_build.h5" 0 -- "$SLUICE" build -q "$SRC/examples/reservoir.c" \
    --param storage_levels=20 --param inflow_classes=3 -o "$W/m_build.h5"
# 3 iterations, a checkpoint at each: ends with 75 (stopped, valid checkpoint)
want solve && sweep "solve (gs, checkpoints, resume)" "$W/s1.h5" 75 -- "$SLUICE" solve -q "$G" -o "$W/s1.h5" \
    --checkpoint "$W/ck" --resume --checkpoint-every 0.000001 --max-iterations 3
rm -rf "$W/ck"
want pi && sweep "solve (pi)" "$W/s2.h5" 0 -- "$SLUICE" solve -q "$G" -o "$W/s2.h5" --method pi
want verify && sweep "verify" "$W/none.out" 0 -- "$SLUICE" verify -q "$G" "$W/good_sol.h5"
want export && sweep "export" "$W/p.csv" 0 -- "$SLUICE" export "$W/good_sol.h5" --model "$G" -o "$W/p.csv"
echo "# $total allocation failures injected"
sl_finish
