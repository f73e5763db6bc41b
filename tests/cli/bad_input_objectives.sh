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
# optional datasets are fingerprinted only when present: a model without them
# keeps the fingerprint it had before (value recorded with sluice at commit
# 5c84444, before /pair/visits and /terminal_value were fingerprinted)
expect "fingerprint of a model without optional datasets is unchanged" --code 0 --out "7d0ea00cf279e10e3747d0794afacf7f" -- \
    "$SLUICE" info "$W/fin.h5"
# terminal values: given to import (covered by the fingerprint), or edited in
printf 'state,terminal_value\n1,2.5\n0,nan\n' >"$W/term_nan.csv"
expect "import: a terminal value that is not a number names the line" --code 65 --err "term_nan.csv:3" --err "terminal_value" --gone "$O" -- \
    "$SLUICE" import -q "$W/plant.csv" --discount 1 --objective finite -o "$O" --terminal-values "$W/term_nan.csv"
printf 'state,terminal_value\n0,2.5\n' >"$W/term_short.csv"
expect "import: a state without a terminal value" --code 65 --err "term_short.csv" --err "state 1" --gone "$O" -- \
    "$SLUICE" import -q "$W/plant.csv" --discount 1 --objective finite -o "$O" --terminal-values "$W/term_short.csv"
printf 'state,terminal_value\n0,2.5\n1,1\n0,3\n' >"$W/term_twice.csv"
expect "import: a state given two terminal values" --code 65 --err "term_twice.csv:4" --err "state 0" --gone "$O" -- \
    "$SLUICE" import -q "$W/plant.csv" --discount 1 --objective finite -o "$O" --terminal-values "$W/term_twice.csv"
printf 'state,terminal_value\n0,2.5\n1,1\n' >"$W/term.csv"
expect "import: terminal values for the discounted objective" --code 64 --err "finite" --gone "$O" -- \
    "$SLUICE" import -q "$W/plant.csv" --discount 0.9 -o "$O" --terminal-values "$W/term.csv"
cp "$W/fin.h5" "$W/fin_term.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); f['terminal_value']=[1.0,2.0]" "$W/fin_term.h5"
expect "finite: /terminal_value added by hand (fingerprint)" --code 65 --err "fingerprint" --err "fin_term.h5" --gone "$O" -- \
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
# a stage factor: these objectives keep the file layout (no stage-interleaved
# renumbering), so a staged model solves and verifies on 1 and more ranks
expect "setup: staged model with the finite objective" --code 0 -- \
    "$SLUICE" build -q "$SRC/tests/data/staged_ferry.c" --objective finite --discount 1 -o "$W/ferry.h5"
expect "finite: staged model solves" --code 0 -- "$SLUICE" solve -q "$W/ferry.h5" -o "$W/ferry_sol.h5" --horizon 3
expect "finite: staged model's solution verifies" --code 0 --out "CERTIFIED" -- \
    "$SLUICE" verify "$W/ferry.h5" "$W/ferry_sol.h5"
# models estimated from logged experience: visit counts, bonus and penalty
cat >"$W/log.csv" <<'CSV'
state,action,reward,next_state
0,0,1,1
0,0,1,0
0,1,0,1
1,0,2,0
1,1,0,1
CSV
expect "setup: estimated model" --code 0 -- "$SLUICE" estimate -q "$W/log.csv" --discount 0.9 -o "$W/est.h5"
expect "estimate: --smoothing negative" --code 64 --err "--smoothing" --gone "$O" -- \
    "$SLUICE" estimate -q "$W/log.csv" --discount 0.9 -o "$O" --smoothing -1
expect "solve: --visit-bonus on a model without visit counts" --code 64 --err "visit" --err "disc.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/disc.h5" -o "$O" --visit-bonus 1
expect "solve: --visit-bonus and --visit-penalty together" --code 64 --err "exclude" --gone "$O" -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --visit-bonus 1 --visit-penalty 1
expect "solve: --visit-penalty not positive" --code 64 --err "--visit" --gone "$O" -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --visit-penalty 0
# checkpoints record the visit adjustment; a resume must ask for the same one
expect "setup: checkpoint of a solve with --visit-bonus 1" --code 75 -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --visit-bonus 1 --checkpoint "$W/ck_est" --max-iterations 1
expect "solve: --resume with another --visit-bonus than the checkpoint's" --code 65 --err "visit bonus 1" --err "visit bonus 2" --err "ck_est" --gone "$O" --keep "$W/ck_est/ckpt-000001.h5" -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --visit-bonus 2 --checkpoint "$W/ck_est" --resume
expect "solve: --resume with --visit-penalty from a --visit-bonus checkpoint" --code 65 --err "visit penalty 1" --gone "$O" --keep "$W/ck_est/ckpt-000001.h5" -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --visit-penalty 1 --checkpoint "$W/ck_est" --resume
expect "solve: --resume without the checkpoint's --visit-bonus" --code 65 --err "no visit adjustment" --gone "$O" --keep "$W/ck_est/ckpt-000001.h5" -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --checkpoint "$W/ck_est" --resume
expect "setup: checkpoint of a solve without adjustment" --code 75 -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --checkpoint "$W/ck_est0" --max-iterations 1
expect "solve: --resume with --visit-bonus from a checkpoint without adjustment" --code 65 --err "no visit adjustment" --err "visit bonus 1" --gone "$O" --keep "$W/ck_est0/ckpt-000001.h5" -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$O" --visit-bonus 1 --checkpoint "$W/ck_est0" --resume
expect "setup: resume with the same --visit-bonus" --code 0 -- \
    "$SLUICE" solve -q "$W/est.h5" -o "$W/est_res.h5" --visit-bonus 1 --checkpoint "$W/ck_est" --resume
expect "setup: the same solve uninterrupted" --code 0 -- "$SLUICE" solve -q "$W/est.h5" -o "$W/est_full.h5" --visit-bonus 1
expect "solve: resumed --visit-bonus run equals the uninterrupted one (within 2 tolerances) and records the bonus" --code 0 -- \
    "$PY" -c "import h5py,sys,numpy as np; a=h5py.File(sys.argv[1],'r'); b=h5py.File(sys.argv[2],'r'); sys.exit(0 if np.max(np.abs(a['value'][...]-b['value'][...])) <= 2e-6 and a.attrs['visit_adjust'] == 1.0 else 1)" "$W/est_res.h5" "$W/est_full.h5"
expect "verify: the resumed --visit-bonus solution" --code 0 --out "CERTIFIED" -- "$SLUICE" verify "$W/est.h5" "$W/est_res.h5"
expect "solve: --visit-bonus on the average objective" --code 64 --err "--visit-bonus" --err "average" --gone "$O" -- \
    "$SLUICE" solve -q "$W/avg.h5" -o "$O" --visit-bonus 1
expect "info: --thin-below 0" --code 64 --err "--thin-below" -- "$SLUICE" info "$W/est.h5" --thin-below 0
cp "$W/est.h5" "$W/est_neg.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); v=f['pair/visits'][...]; v[2]=-3; f['pair/visits'][...]=v" "$W/est_neg.h5"
expect "solve: /pair/visits with a negative count names the state and action" --code 65 --err "pair/visits" --err "state 1" --err "action 0" --gone "$O" -- \
    "$SLUICE" solve -q "$W/est_neg.h5" -o "$O"
cp "$W/est.h5" "$W/est_len.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); del f['pair/visits']; f['pair/visits']=[1,2,3]" "$W/est_len.h5"
expect "solve: /pair/visits of the wrong length" --code 65 --err "pair/visits" --gone "$O" -- \
    "$SLUICE" solve -q "$W/est_len.h5" -o "$O"
cp "$W/est.h5" "$W/est_more.h5"
"$PY" -c "import h5py,sys; f=h5py.File(sys.argv[1],'r+'); v=f['pair/visits'][...]; v[0]+=5; f['pair/visits'][...]=v" "$W/est_more.h5"
expect "solve: an edited visit count (fingerprint)" --code 65 --err "fingerprint" --err "est_more.h5" --gone "$O" -- \
    "$SLUICE" solve -q "$W/est_more.h5" -o "$O"
# a definitely multichain model: {0, 1} and {2, 3} are closed under every
# policy (state 4 is transient); invented numbers
cat >"$W/multi.csv" <<'CSV'
state,action,next_state,probability,reward
0,0,1,1,1
1,0,0,0.5,0
1,0,1,0.5,2
2,0,3,1,0
3,0,2,1,0.5
3,1,3,1,0.25
4,0,0,0.5,0
4,0,2,0.5,1
CSV
expect "setup: multichain average model" --code 0 -- "$SLUICE" import -q "$W/multi.csv" --discount 1 --objective average -o "$W/multi.h5"
expect "average: multichain model refused, naming states of two closed classes" --code 65 --err "multichain" --err "state 0" --err "state 2" --gone "$O" -- \
    "$SLUICE" solve -q "$W/multi.h5" -o "$O"
expect "average --method pi: multichain model refused, naming states of two closed classes" --code 65 --err "multichain" --err "state 0" --err "state 2" --gone "$O" -- \
    "$SLUICE" solve -q "$W/multi.h5" -o "$O" --method pi
if [ -n "${SLUICE_MPIEXEC:-}" ] && [ -x "$SLUICE_MPIEXEC" ]; then
expect "average on 3 ranks: multichain model refused the same way" --code 65 --err "multichain" --err "state 0" --err "state 2" --gone "$O" -- \
    "$SLUICE_MPIEXEC" --oversubscribe -n 3 "$SLUICE" solve -q "$W/multi.h5" -o "$O" --method pi
fi
# terminal values from a generator's optional sluice_terminal_value()
expect "build: a generator's terminal value that is not a number names the state" --code 65 --err "sluice_terminal_value" --err "state 5" --gone "$O" -- \
    "$SLUICE" build -q "$SRC/tests/data/gen_terminal.c" --objective finite --param nan_state=5 -o "$O"
expect "build: a generator's terminal value call that fails names the state" --code 65 --err "sluice_terminal_value" --err "error 7" --err "state 9" --gone "$O" -- \
    "$SLUICE" build -q "$SRC/tests/data/gen_terminal.c" --objective finite --param fail_state=9 -o "$O"
# policy iteration over the memory limit with --strict-memory: no fallback
expect "total --method pi: factorization over --memory-limit with --strict-memory" --code 65 --err "--strict-memory" --err "value iteration" --gone "$O" -- \
    "$SLUICE" solve -q "$W/tot.h5" -o "$O" --method pi --memory-limit 1 --strict-memory
# --resume in a directory holding only the other kind of checkpoint
expect "setup: finite stages checkpoint" --code 75 -- "$SLUICE" solve -q "$W/fin.h5" -o "$O" --horizon 4 --checkpoint "$W/ck_fin" --max-iterations 1
expect "total: --resume from a finite-horizon stages checkpoint" --code 65 --err "finite-stages.h5" --err "tot.h5" --gone "$O" --keep "$W/ck_fin/finite-stages.h5" -- \
    "$SLUICE" solve -q "$W/tot.h5" -o "$O" --checkpoint "$W/ck_fin" --resume
expect "setup: total checkpoint" --code 75 -- "$SLUICE" solve -q "$W/tot.h5" -o "$O" --checkpoint "$W/ck_tot" --max-iterations 1
expect "finite: --resume from a value-iteration checkpoint" --code 65 --err "ckpt-000001.h5" --err "finite-horizon" --gone "$O" --keep "$W/ck_tot/ckpt-000001.h5" -- \
    "$SLUICE" solve -q "$W/fin.h5" -o "$O" --horizon 4 --checkpoint "$W/ck_tot" --resume
expect "average: --resume from a total model's checkpoint" --code 65 --err "another model" --err "ckpt-000001.h5" --gone "$O" --keep "$W/ck_tot/ckpt-000001.h5" -- \
    "$SLUICE" solve -q "$W/avg.h5" -o "$O" --checkpoint "$W/ck_tot" --resume
sl_finish
