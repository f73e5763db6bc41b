# bad_input_solve.sh - bad options and mismatched or damaged files for
# `sluice solve`, `evaluate`, `verify` and `export`.
# usage: bash bad_input_solve.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

# Models A and B have the same shape (the two-state example at two discount
# factors), so only the fingerprint tells them apart.
A=$W/a.h5
B=$W/b.h5
SA=$W/a_sol.h5
O=$W/out.h5
C=$W/out.csv
expect "setup: model A builds" --code 0 -- "$SLUICE" build -q "$SRC/examples/two_state.c" -o "$A"
expect "setup: model B builds" --code 0 -- \
    "$SLUICE" build -q "$SRC/examples/two_state.c" --param discount=0.5 -o "$B"
expect "setup: A solves" --code 0 -- "$SLUICE" solve -q "$A" -o "$SA"
expect "setup: A's solution verifies against A" --code 0 --out "CERTIFIED" -- "$SLUICE" verify "$A" "$SA"
expect "setup: A's policy evaluates on A" --code 0 -- "$SLUICE" evaluate -q "$A" --policy "$SA" -o "$W/a_val.h5"
expect "setup: A's solution exports with A" --code 0 -- "$SLUICE" export "$SA" --model "$A" -o "$W/a.csv"
if [ -f "$W/a.csv" ] && [ "$(wc -l <"$W/a.csv")" -eq 3 ] && grep -q '^1,0,' "$W/a.csv"; then
    note_ok "setup: exported CSV has a header and one row per state"
else
    note_fail "setup: exported CSV has a header and one row per state" "$(head -5 "$W/a.csv" 2>&1)"
fi

# ---- a solution used with a different model
expect "evaluate: policy of model A on model B" --code 65 --err "fingerprint" --err "different model" \
    --err "a_sol.h5" --err "b.h5" --gone "$O" -- "$SLUICE" evaluate -q "$B" --policy "$SA" -o "$O"
expect "verify: solution of model A against model B" --code 65 --err "fingerprint" --err "different model" \
    --err "a_sol.h5" --err "b.h5" -- "$SLUICE" verify -q "$B" "$SA"
expect "export: solution of model A with model B" --code 65 --err "fingerprint" --err "different model" \
    --err "a_sol.h5" --gone "$C" -- "$SLUICE" export "$SA" --model "$B" -o "$C"
cp "$W/a.csv" "$W/kept.csv"
expect "export: failed export keeps an existing CSV intact" --code 65 --err "different model" \
    --keep "$W/kept.csv" -- "$SLUICE" export "$SA" --model "$B" -o "$W/kept.csv"

# ---- solve options
expect "solve: unknown --method" --code 64 --err "--method" --err "bogus" --gone "$O" -- \
    "$SLUICE" solve -q "$A" -o "$O" --method bogus
expect "solve: --tolerance -1" --code 64 --err "--tolerance" --gone "$O" -- \
    "$SLUICE" solve -q "$A" -o "$O" --tolerance -1
expect "solve: --tolerance not a number" --code 64 --err "--tolerance" --err "tiny" --gone "$O" -- \
    "$SLUICE" solve -q "$A" -o "$O" --tolerance tiny
expect "solve: --resume without --checkpoint" --code 64 --err "--resume" --err "--checkpoint" --gone "$O" -- \
    "$SLUICE" solve -q "$A" -o "$O" --resume

# ---- discount 1.0 (total objective) is not solvable as a discounted model
printf 'state,action,next_state,probability,reward\n0,0,1,1,1\n1,0,0,1,1\n' >"$W/loop.csv"
expect "setup: import --objective total --discount 1.0" --code 0 -- \
    "$SLUICE" import -q "$W/loop.csv" --objective total --discount 1.0 -o "$W/total.h5"
expect "solve: a total-objective model with discount 1.0" --code 65 --err "total.h5" --err "total" \
    --gone "$O" -- "$SLUICE" solve -q "$W/total.h5" -o "$O"

# ---- damaged solutions (edited with h5py)
py 'import sys, h5py, numpy as np
src = sys.argv[1]
def edit(dst, fn):
    import shutil
    shutil.copyfile(src, dst)
    with h5py.File(dst, "r+") as f:
        fn(f)
def bump(f): f["value"][1] = f["value"][1] + 1.0
def nan(f): f["value"][0] = np.nan
def act(f): f["policy"][1] = 1
edit(sys.argv[2], bump)
edit(sys.argv[3], nan)
edit(sys.argv[4], act)' "$SA" "$W/bumped.h5" "$W/nan.h5" "$W/bad_action.h5" ||
    note_fail "setup: damaged solutions" "h5py edit failed"
expect "verify: value perturbed by 1.0 in one state" --code 65 --err "bumped.h5" --err "not certified" -- \
    "$SLUICE" verify -q "$A" "$W/bumped.h5"
expect "verify: value NaN in one state" --code 65 --err "nan.h5" \
    -- "$SLUICE" verify -q "$A" "$W/nan.h5"
expect "export: value NaN in one state" --code 65 --err "nan.h5" --err "state 0" --gone "$C" \
    -- "$SLUICE" export "$W/nan.h5" --model "$A" -o "$C"
expect "verify: policy action not available" --code 65 --err "bad_action.h5" --err "state 1" \
    --err "action 1" -- "$SLUICE" verify -q "$A" "$W/bad_action.h5"
expect "evaluate: policy action not available" --code 65 --err "bad_action.h5" --err "state 1" \
    --err "action 1" --gone "$O" -- "$SLUICE" evaluate -q "$A" --policy "$W/bad_action.h5" -o "$O"
expect "export: policy action not available" --code 65 --err "bad_action.h5" --err "state 1" \
    --err "action 1" --gone "$C" \
    -- "$SLUICE" export "$W/bad_action.h5" --model "$A" -o "$C"
expect "verify: a model file given as the solution" --code 65 --err "a.h5" --err "not a solution" -- \
    "$SLUICE" verify -q "$A" "$A"
expect "verify: missing solution file" --code 66 --err "nowhere.h5" -- "$SLUICE" verify -q "$A" "$W/nowhere.h5"
expect "evaluate: missing policy file" --code 66 --err "nowhere.h5" --gone "$O" -- \
    "$SLUICE" evaluate -q "$A" --policy "$W/nowhere.h5" -o "$O"

# ---- outputs that cannot be created
touch "$W/plain"
expect "export: into a path below a regular file" --code 73 --err "plain/x.csv" --gone "$W/plain/x.csv" -- \
    "$SLUICE" export "$SA" --model "$A" -o "$W/plain/x.csv"
mkdir -p "$W/dir.csv"
expect "export: onto an existing directory" --code 73 --err "dir.csv" --clean "$W/dir.csv" -- \
    "$SLUICE" export "$SA" --model "$A" -o "$W/dir.csv"
expect "export: into a missing directory" --code 73 --err "no_dir" --gone "$W/no_dir/x.csv" -- \
    "$SLUICE" export "$SA" --model "$A" -o "$W/no_dir/x.csv"
if [ "$(id -u)" != 0 ]; then
    mkdir -p "$W/ro" && chmod 555 "$W/ro"
    expect "export: into a read-only directory" --code 73 --err "ro" --gone "$W/ro/x.csv" -- \
        "$SLUICE" export "$SA" --model "$A" -o "$W/ro/x.csv"
    chmod 755 "$W/ro"
else
    echo "skip - export: into a read-only directory (running as root: permissions are not enforced)"
fi
expect "solve: output into a missing directory" --code 73 --err "no_dir" --gone "$W/no_dir/s.h5" -- \
    "$SLUICE" solve -q "$A" -o "$W/no_dir/s.h5"
if [ -e "$W/no_dir" ]; then
    note_fail "solve: missing output directory was not created" "$W/no_dir exists"
else
    note_ok "solve: missing output directory was not created"
fi
expect "evaluate: output into a missing directory" --code 73 --err "no_dir" --gone "$W/no_dir/v.h5" -- \
    "$SLUICE" evaluate -q "$A" --policy "$SA" -o "$W/no_dir/v.h5"

sl_finish
