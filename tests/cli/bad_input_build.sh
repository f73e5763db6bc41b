# bad_input_build.sh - `sluice build` on bad generators and bad options.
# usage: bash bad_input_build.sh SLUICE_BINARY WORKDIR SOURCE_DIR
# Generators: SOURCE_DIR/tests/data/gen_faulty.c (one injected fault per
# --param mode=N, always at state 3 / action 1), gen_bad_shape.c, gen_no_compile.c.
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

GEN=$DATA/gen_faulty.c
SHAPE=$DATA/gen_bad_shape.c
M=$W/model.h5

# ---- the good path first: the same generator with no fault builds, solves, verifies
expect "build: fault-free generator builds" --code 0 --err "6 states" -- \
    "$SLUICE" build "$GEN" -o "$W/good.h5"
expect "build: fault-free model solves" --code 0 -- \
    "$SLUICE" solve -q "$W/good.h5" -o "$W/good_sol.h5"
expect "build: fault-free solution verifies" --code 0 -- \
    "$SLUICE" verify -q "$W/good.h5" "$W/good_sol.h5"

# ---- values emitted by transitions()
fault() { # fault NAME MODE ERRWORD...
    local name=$1 mode=$2
    shift 2
    local e=()
    for k in "$@"; do e+=(--err "$k"); done
    expect "build: $name" --code 65 --err "gen_faulty.c" --err "state 3" --err "action 1" "${e[@]}" \
        --gone "$M" -- "$SLUICE" build -q "$GEN" --param mode="$mode" -o "$M"
}
fault "probability < 0" 1 "-0.25" "probability"
fault "probability > 1" 2 "1.5" "probability"
fault "NaN probability" 3 "nan" "probability"
fault "infinite reward" 4 "inf" "reward"
fault "NaN reward" 5 "nan" "reward"
fault "probabilities sum to 0.999" 6 "0.999" "sum"
fault "probability drift 1e-8 without --renormalize" 7 "sum" "--renormalize"
fault "next state = n_states" 8 "next state 6" "range"
fault "next state negative" 9 "next state -1" "range"
fault "transitions() returns an error" 11 "error 7"
# the crash handler can only name the generator (its sluice_generator.name)
expect "build: generator segfaults" --code 65 --err "faulty_lock" --err "state 3" --err "action 1" \
    --err "crashed" --gone "$M" -- "$SLUICE" build -q "$GEN" --param mode=12 -o "$M"

expect "build: a state with no available action" --code 65 --err "gen_faulty.c" --err "state 4" \
    --err "no action" --gone "$M" -- "$SLUICE" build -q "$GEN" --param mode=10 -o "$M"

expect "build: --renormalize does not hide a sum of 0.999" --code 65 --err "state 3" --err "action 1" \
    --err "0.999" --gone "$M" -- "$SLUICE" build -q "$GEN" --param mode=6 --renormalize -o "$M"

# ---- --renormalize with drift 1e-8 at two pairs: accepted, counted, sums exact
# max_drift FILE: print the pair count and max |sum of probabilities - 1|
max_drift() {
    py '
import sys, h5py, numpy as np
with h5py.File(sys.argv[1], "r") as f:
    ft = f["pair/first_transition"][...]
    p = f["transition/probability"][...]
sums = np.add.reduceat(p, ft[:-1])
print("%d pairs, max drift %.3g" % (len(sums), np.abs(sums - 1.0).max()))
sys.exit(0 if np.abs(sums - 1.0).max() <= 1e-15 else 3)
' "$1" 2>&1
}
R=$W/renorm.h5
expect "build: --renormalize rescales drift 1e-8 and says how many" --code 0 \
    --err "rescaled 2 pair" -- "$SLUICE" build -q "$GEN" --param mode=7 --renormalize -o "$R"
out=$(max_drift "$R")
case $? in
    0) note_ok "build: renormalized model sums to 1 within 1e-15 ($out)" ;;
    *) note_fail "build: renormalized model sums to 1 within 1e-15" "$out" ;;
esac
# control: the same drift let through by a looser tolerance, not rescaled,
# must be seen by the check above (so the check can fail)
expect "build: drift 1e-8 accepted with --prob-tolerance 1e-7" --code 0 -- \
    "$SLUICE" build -q "$GEN" --param mode=7 --prob-tolerance 1e-7 -o "$W/drift.h5"
out=$(max_drift "$W/drift.h5")
case $? in
    3) note_ok "build: the sum check rejects the unrescaled model ($out)" ;;
    *) note_fail "build: the sum check rejects the unrescaled model" "$out" ;;
esac

# ---- declared sizes
expect "build: factor sizes overflow int64 (wrapped product is 2^32)" --code 65 --err "gen_bad_shape.c" \
    --err "overflow" --gone "$M" -- "$SLUICE" build -q "$SHAPE" --param mode=2 -o "$M"
expect "build: factor sizes overflow int64 (wrapped product is 0)" --code 65 --err "gen_bad_shape.c" \
    --err "overflow" --gone "$M" \
    -- "$SLUICE" build -q "$SHAPE" --param mode=1 -o "$M"
expect "build: state count 2^62" --code 65 --err "gen_bad_shape.c" --err "4611686018427387904" \
    --err "overflow" --gone "$M" -- "$SLUICE" build -q "$SHAPE" --param mode=3 -o "$M"
expect "build: 0 states" --code 65 --err "gen_bad_shape.c" --err "empty" --gone "$M" -- \
    "$SLUICE" build -q "$SHAPE" --param mode=4 -o "$M"
expect "build: negative state count" --code 65 --err "gen_bad_shape.c" --err "-5 states" --gone "$M" -- \
    "$SLUICE" build -q "$SHAPE" --param mode=5 -o "$M"

# ---- the generator file itself
expect "build: generator does not compile (compiler output shown)" --code 65 --err "gen_no_compile.c" \
    --err "undeclared_flow_rate" --err "does not compile" --gone "$M" -- \
    "$SLUICE" build -q "$DATA/gen_no_compile.c" -o "$M"
expect "build: missing generator file" --code 66 --err "gen_nowhere.c" --gone "$M" -- \
    "$SLUICE" build -q "$W/gen_nowhere.c" -o "$M"

# ---- options
expect "build: unknown --param name lists the valid names" --code 64 --err "flow_rate" --err "mode" \
    --gone "$M" -- "$SLUICE" build -q "$GEN" --param flow_rate=3 -o "$M"
expect "build: --param value not a number" --code 64 --err "mode" --err "abc" --gone "$M" -- \
    "$SLUICE" build -q "$GEN" --param mode=abc -o "$M"
expect "build: --param value empty" --code 64 --err "mode" --gone "$M" -- \
    "$SLUICE" build -q "$GEN" --param mode= -o "$M"
expect "build: --param without =" --code 64 --err "NAME=VALUE" --gone "$M" -- \
    "$SLUICE" build -q "$GEN" --param mode -o "$M"
expect "build: --discount 1.0 for the discounted objective" --code 64 --err "discount" --err "1" \
    --gone "$M" -- "$SLUICE" build -q "$GEN" --discount 1.0 -o "$M"
expect "build: --discount not a number" --code 64 --err "--discount" --gone "$M" -- \
    "$SLUICE" build -q "$GEN" --discount x -o "$M"
expect "build: output directory missing" --code 73 --err "$W/no_such_dir" --gone "$W/no_such_dir/m.h5" -- \
    "$SLUICE" build -q "$GEN" -o "$W/no_such_dir/m.h5"
touch "$W/plain_file"
expect "build: output directory is a regular file" --code 73 --err "plain_file" \
    --gone "$W/plain_file/m.h5" -- "$SLUICE" build -q "$GEN" -o "$W/plain_file/m.h5"
mkdir -p "$W/a_dir.h5"
expect "build: output path is a directory" --code 73 --err "a_dir.h5" --clean "$W/a_dir.h5" -- \
    "$SLUICE" build -q "$GEN" -o "$W/a_dir.h5"

# ---- nothing lost: a failing build leaves an existing model untouched
cp "$W/good.h5" "$W/keep.h5"
expect "build: failed build keeps the previous model intact" --code 65 --err "state 3" \
    --keep "$W/keep.h5" -- "$SLUICE" build -q "$GEN" --param mode=6 -o "$W/keep.h5"
expect "build: previous model still readable after failed build" --code 0 --out "6" -- \
    "$SLUICE" info "$W/keep.h5"

sl_finish
