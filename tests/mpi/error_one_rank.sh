#!/bin/bash
# error_one_rank.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# An error seen by one rank only ends every rank promptly, with the same
# exit code and one clear message. Runs on 3 ranks (oversubscribed); each
# case must end within 300 s (a hang is a failure: a rank left waiting in a
# collective never exits; 300 s, not less, so that a busy machine is not
# taken for a hang) and the time is printed (about 5 s each at load 8-9).
#   build of tests/data/gen_rank_error.c whose fault is at state 2900 of
#   3000 (rank 2's slice [2000, 3000)):
#       transitions() returns an error -> 65, message names state 2900
#       a probability of 1.5            -> 65, message names state 2900
#       the generator crashes (SIGSEGV) -> 65, message names state 2900
#   solve of a model file whose row 2900 has a probability of 1.5 (rank 2's
#       rows by the partition `sluice info --partition 3` reports) -> 65,
#       message names state 2900; also `sluice verify` of it
#   solve of a staged model (the reservoir example, small) whose last row
#       has a probability of 1.5: each rank reads its share of every stage,
#       the last state is rank 2's -> 65, message names that state
#   a checkpoint write that fails (SLUICE_FAULT_CKPT=1, on every rank's
#       environment) -> 74 on all ranks, one message
# "One message": exactly one line starting "sluice build:" / "sluice solve:"
# (or the generator's crash line) on the combined output of all ranks.

. "$(dirname "$0")/../cli/lib_ckpt.sh"
ck_init "$@"
ck_mpi_init

GEN=$SRC/tests/data/gen_rank_error.c
LIMIT=300

# case3 NAME CODE PATTERN ARGS...: run sluice ARGS on 3 ranks; expect exit
# CODE within LIMIT s and exactly one line matching the regex PATTERN
case3() {
    local name=$1 code=$2 pat=$3 log t0 rc secs n why=()
    shift 3
    log=case$((++ncase)).log
    t0=$EPOCHREALTIME
    timeout -k 5 $LIMIT "$MPIEXEC" -np 3 "${MPIFLAGS[@]}" "$SLUICE" "$@" >"$log" 2>&1 </dev/null
    rc=$?
    secs=$(ck_since "$t0")
    [ $rc -eq 124 ] && why+=("no exit within $LIMIT s (killed)")
    [ $rc -eq "$code" ] || why+=("exit $rc, expected $code")
    n=$(grep -cE -- "$pat" "$log")
    [ "$n" -eq 1 ] || why+=("$n lines match '$pat', expected 1")
    if [ ${#why[@]} -eq 0 ]; then
        ck_ok "$name: exit $rc after $secs s on 3 ranks: $(grep -m1 -E -- "$pat" "$log" | cut -c1-170)"
    else
        ck_not_ok "$name ($secs s)" "$(printf '%s; ' "${why[@]}")"
        grep -v "mca_" "$log" | sed -n '1,8s/^/#   /p'
    fi
}
ncase=0

# the fault's state lies in rank 2's slice of a 3-rank build: [2n/3, n)
case3 "build, transitions() fails at state 2900 (rank 2 only)" 65 "^sluice build: .*state 2900\b" \
    build "$GEN" --param mode=0 -o e0.h5 -q
case3 "build, probability 1.5 at state 2900 (rank 2 only)" 65 "^sluice build: .*state 2900\b" \
    build "$GEN" --param mode=1 -o e1.h5 -q
case3 "build, generator crashes at state 2900 (rank 2 only)" 65 "crashed .*state 2900\b" \
    build "$GEN" --param mode=2 -o e2.h5 -q
for f in e0.h5 e1.h5 e2.h5; do
    [ -e $f ] && ck_not_ok "a failed build left the output $f"
done

# a model file with one bad row on rank 2
"$SLUICE" build "$GEN" --param mode=3 -o good.h5 -q || ck_not_ok "build the valid ring model"
cp good.h5 bad.h5
"$PY" - bad.h5 <<'EOF' || ck_not_ok "damage row 2900"
import sys
import h5py
with h5py.File(sys.argv[1], "r+") as f:
    k = f["/state/first_pair"][2900]          # pair (2900, action 0)
    t = f["/pair/first_transition"][k]
    f["/transition/probability"][t] = 1.5
EOF
owner=$("$SLUICE" info good.h5 --partition 3 2>/dev/null | awk '$1 ~ /^[0-9]+$/ && NF >= 3 && 2900 >= $2 && 2900 < $2 + $3 { print $1 }')
if [ "$owner" = 2 ]; then
    ck_ok "state 2900 is in rank 2's rows of a 3-rank solve (sluice info --partition 3)"
else
    ck_not_ok "state 2900 is not in rank 2's rows (owner '${owner}'): the solve case below does not test one rank"
fi
case3 "solve, model row 2900 has probability 1.5 (rank 2 only)" 65 "^sluice solve: .*state 2900\b" \
    solve bad.h5 -o bad-sol.h5 -q
[ -e bad-sol.h5 ] && ck_not_ok "the failed solve wrote bad-sol.h5"
"$SLUICE" solve good.h5 -o good-sol.h5 -q || ck_not_ok "solve the valid ring model"
case3 "verify, model row 2900 has probability 1.5 (rank 2 only)" 65 "^sluice verify: .*state 2900\b" \
    verify bad.h5 good-sol.h5

# the same with a stage factor: on 3 ranks `solve` reads each rank's share
# of every stage straight from the file (sl_model_load_staged), so the last
# state (the largest u, in every stage) is read by rank 2 only
"$SLUICE" build "$SRC/examples/reservoir.c" --param storage_levels=30 --param inflow_classes=4 \
    -o staged.h5 -q || ck_not_ok "build the small reservoir"
cp staged.h5 staged-bad.h5
last=$("$PY" - staged-bad.h5 <<'EOF'
import sys
import h5py
with h5py.File(sys.argv[1], "r+") as f:
    s = f["/state/first_pair"].shape[0] - 2    # the last state
    k = f["/state/first_pair"][s]
    t = f["/pair/first_transition"][k]
    f["/transition/probability"][t] = 1.5
    print(s)
EOF
) || ck_not_ok "damage the last row of the small reservoir"
case3 "solve, staged model, last row has probability 1.5 (rank 2's share only)" 65 \
    "^sluice solve: .*state $last\b" solve staged-bad.h5 -o staged-bad-sol.h5 -q
[ -e staged-bad-sol.h5 ] && ck_not_ok "the failed solve wrote staged-bad-sol.h5"

# checkpoint write failure on 3 ranks
# (mpirun passes the environment on to the ranks it starts on this host)
SLUICE_FAULT_CKPT=1 case3 "solve, the first checkpoint write fails (SLUICE_FAULT_CKPT=1)" 74 \
    "^sluice solve: .*injected" solve good.h5 -o f-sol.h5 --checkpoint ckf --max-iterations 3 -q
[ -e ckf/ckpt-000001.h5 ] && ck_not_ok "the failed checkpoint write left ckf/ckpt-000001.h5"
ck_finish
