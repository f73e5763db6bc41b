# bad_input_objectives.sh - bad options and damaged files for the finite,
# total and average objectives of `sluice solve` and `verify`.
# usage: bash bad_input_objectives.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

O=$W/out.h5
# an invented two-state plant: 0 = spill gate open, 1 = closed (no source)
cat >"$W/plant.csv" <<'CSV'
state,action,next_state,probability,reward
0,0,0,0.5,1
0,0,1,0.5,2
0,1,1,1,0.5
1,0,0,0.25,3
1,0,1,0.75,0
CSV
# the same with an absorbing state 2 reached with probability 1/2 per step
cat >"$W/ssp.csv" <<'CSV'
state,action,next_state,probability,reward
0,0,2,0.5,1
0,0,1,0.5,0
1,0,2,0.5,2
1,0,0,0.5,0
2,0,2,1,0
CSV
expect "setup: finite model" --code 0 -- "$SLUICE" import -q "$W/plant.csv" --discount 1 --objective finite -o "$W/fin.h5"
expect "setup: average model" --code 0 -- "$SLUICE" import -q "$W/plant.csv" --discount 1 --objective average -o "$W/avg.h5"
expect "setup: total model" --code 0 -- "$SLUICE" import -q "$W/ssp.csv" --discount 1 --objective total -o "$W/tot.h5"
expect "setup: total model without absorption" --code 0 -- \
    "$SLUICE" import -q "$W/plant.csv" --discount 1 --objective total -o "$W/tot_bad.h5"
expect "setup: discounted model" --code 0 -- "$SLUICE" import -q "$W/plant.csv" --discount 0.9 -o "$W/disc.h5"
expect "setup: discounted solves" --code 0 -- "$SLUICE" solve -q "$W/disc.h5" -o "$W/disc_sol.h5"
expect "setup: finite solves" --code 0 -- "$SLUICE" solve -q "$W/fin.h5" -o "$W/fin_sol.h5" --horizon 3

expect "finite: no --horizon" --code 64 --err "--horizon" --err "fin.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin.h5" -o "$O"
expect "finite: --horizon 0" --code 64 --err "--horizon" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin.h5" -o "$O" --horizon 0
expect "finite: --horizon not a number" --code 64 --err "--horizon" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin.h5" -o "$O" --horizon many
expect "finite: --terminal missing file" --code 66 --err "nosuch.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin.h5" -o "$O" --horizon 2 --terminal "$W/nosuch.h5"
expect "finite: --terminal is a model, not a solution" --code 65 --err "disc.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin.h5" -o "$O" --horizon 2 --terminal "$W/disc.h5"
expect "setup: three-state finite model" --code 0 -- "$SLUICE" import -q "$W/ssp.csv" --discount 1 --objective finite -o "$W/fin3.h5"
expect "finite: --terminal with another number of states" --code 65 --err "fin_sol.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin3.h5" -o "$O" --horizon 2 --terminal "$W/fin_sol.h5"
expect "discounted: --horizon refused" --code 64 --err "--horizon" --err "disc.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/disc.h5" -o "$O" --horizon 4
expect "average: --horizon refused" --code 64 --err "--horizon" --gone "$O" -- \
    "$SLUICE" solve -q "$W/avg.h5" -o "$O" --horizon 4
expect "average: --aperiodicity out of range" --code 64 --err "--aperiodicity" --gone "$O" -- \
    "$SLUICE" solve -q "$W/avg.h5" -o "$O" --aperiodicity 1
expect "total: no absorbing state" --code 65 --err "no absorbing state" --err "tot_bad.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/tot_bad.h5" -o "$O"
expect "total: discount below 1 refused" --code 65 --err "discount" --gone "$O" -- \
    bash -c "'$SLUICE' import -q '$W/ssp.csv' --discount 0.5 --objective total -o '$W/tot_half.h5' && '$SLUICE' solve -q '$W/tot_half.h5' -o '$O'"
# a broken finite terminal dataset in the model
cp "$W/fin.h5" "$W/fin_term.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); f['terminal_value']=[1.0,float('nan')]" "$W/fin_term.h5"
expect "finite: non-finite /terminal_value names the state" --code 65 --err "terminal_value" --err "state 1" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin_term.h5" -o "$O" --horizon 2
cp "$W/fin.h5" "$W/fin_term3.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); f['terminal_value']=[1.0,2.0,3.0]" "$W/fin_term3.h5"
expect "finite: /terminal_value of the wrong length" --code 65 --err "terminal_value" --err "3 entries" --gone "$O" -- \
    "$SLUICE" solve -q "$W/fin_term3.h5" -o "$O" --horizon 2
# verify: a finite solution with a stage policy removed
cp "$W/fin_sol.h5" "$W/fin_cut.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); del f['stage/policy_000001']" "$W/fin_cut.h5"
expect "verify: finite solution missing a stage" --code 65 --err "policy_000001" -- \
    "$SLUICE" verify -q "$W/fin.h5" "$W/fin_cut.h5"
# verify: a finite solution against the average model (same states, another objective)
expect "verify: solution of another objective" --code 65 --err "different model" -- \
    "$SLUICE" verify -q "$W/avg.h5" "$W/fin_sol.h5"
sl_finish
