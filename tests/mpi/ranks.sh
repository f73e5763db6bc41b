#!/bin/bash
# ranks.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# The same answers on 1, 2 and 3 MPI ranks (3 oversubscribed on a 2-core machine):
#   * `build` of the reservoir example and `import` of a random sparse model
#     (triplet CSV written with tests/python/mdp_common.py) give the same
#     fingerprint and bitwise the same model arrays at every rank count;
#   * `solve` with every method (gs, jacobi, mpi, pi) certifies (exit 0) and
#     gives values within 2*tolerance of the one-rank solve of the same
#     method (both are within the tolerance of v*); the policies agree except
#     at ties, where both actions' Q values (computed here from the one-rank
#     values) are within 1e-9 of each other. The numbers of differing states
#     are printed.

. "$(dirname "$0")/../cli/lib_ckpt.sh"
ck_init "$@"
ck_mpi_init

tol=1e-6
TIE=1e-9
RANKS=(1 2 3)
METHODS=(gs jacobi mpi pi)

# same_model A B: bitwise equal model arrays and attributes that matter
same_model() {
    "$PY" - "$1" "$2" <<'EOF'
import sys
import h5py
import numpy as np
a, b = (h5py.File(p, "r") for p in sys.argv[1:3])
bad = []
for k in ("/state/first_pair", "/pair/action", "/pair/reward", "/pair/first_transition",
          "/transition/target", "/transition/probability"):
    x, y = a[k][...], b[k][...]
    if x.shape != y.shape or not np.array_equal(x.view(np.uint8), y.view(np.uint8)):
        bad.append(k)
for k in ("n_states", "n_pairs", "n_transitions", "discount", "fingerprint"):
    if a.attrs[k] != b.attrs[k]:
        bad.append("attr " + k)
print("differs: " + ", ".join(bad) if bad else "bitwise equal")
sys.exit(1 if bad else 0)
EOF
}

# model_case NAME COMMAND...: COMMAND writes $NAME-np$N.h5 when run under N ranks
# ($OUT is set to that name); the models must agree across rank counts
models_agree() {
    local name=$1 n fp0="" fp
    for n in "${RANKS[@]}"; do
        fp=$(ck_tool attr "$name-np$n.h5" fingerprint 2>/dev/null)
        if [ -z "$fp0" ]; then
            fp0=$fp
        elif [ "$fp" = "$fp0" ] && out=$(same_model "$name-np1.h5" "$name-np$n.h5"); then
            ck_ok "$name: $n ranks give the fingerprint $fp and $out model arrays as 1 rank"
        else
            ck_not_ok "$name: $n ranks differ from 1 rank" "fingerprint $fp vs $fp0; ${out:-}"
        fi
    done
}

solve_all() {
    local model=$1 name=$2 m n rc t0 out
    for m in "${METHODS[@]}"; do
        for n in "${RANKS[@]}"; do
            t0=$EPOCHREALTIME
            timeout "$CK_HANG" "$MPIEXEC" -np "$n" "${MPIFLAGS[@]}" "$SLUICE" solve "$model" -o "$name-$m-np$n.h5" \
                --method "$m" --tolerance $tol -q >"$name-$m-np$n.log" 2>&1
            rc=$?
            if [ $rc -ne 0 ]; then
                ck_not_ok "$name: solve --method $m on $n ranks: exit $rc"
                tail -n 4 "$name-$m-np$n.log" | sed 's/^/#   /'
                continue
            fi
            [ "$n" -eq 1 ] && { ck_ok "$name: solve --method $m on 1 rank certified ($(ck_since "$t0") s)"; continue; }
            if out=$(ck_tool close "$model" "$name-$m-np1.h5" "$name-$m-np$n.h5" "$(awk -v t=$tol 'BEGIN{print 2*t}')" $TIE); then
                ck_ok "$name: --method $m, $n ranks vs 1 ($(ck_since "$t0") s): $out"
            else
                ck_not_ok "$name: --method $m, $n ranks vs 1" "$out"
            fi
        done
    done
}

# ---- the policy comparison itself, on the exact tie of examples/tie.c ---------------------------
# state 0 has an exact tie at discount 0.5 and a gap of 1/8 at 0.75: a copy of
# the solution with state 0's action swapped must pass at 0.5 and fail at 0.75
swap0() {
    cp "$1" "$2" && "$PY" -c '
import sys, h5py
with h5py.File(sys.argv[1], "r+") as f:
    p = f["/policy"]
    p[0] = 1 - p[0]' "$2"
}
for g in 0.5 0.75; do
    if ! { "$SLUICE" build "$SRC/examples/tie.c" --param discount=$g -o "tie$g.h5" -q &&
        "$SLUICE" solve "tie$g.h5" -o "tie$g-sol.h5" --tolerance 1e-9 -q && swap0 "tie$g-sol.h5" "tie$g-swap.h5"; }; then
        ck_not_ok "tie.c at discount $g: build, solve or swap failed"
    fi
done
if out=$(ck_tool close tie0.5.h5 tie0.5-sol.h5 tie0.5-swap.h5 1e-9 $TIE); then
    ck_ok "comparison accepts a swapped action at an exact tie: $out"
else
    ck_not_ok "comparison rejects a swapped action at an exact tie" "$out"
fi
if out=$(ck_tool close tie0.75.h5 tie0.75-sol.h5 tie0.75-swap.h5 1e-9 $TIE); then
    ck_not_ok "comparison accepts a swapped action that is 1/8 worse" "$out"
else
    ck_ok "comparison rejects a swapped action that is 1/8 worse: $out"
fi

# ---- the reservoir example ------------------------------------------------------------------
for n in "${RANKS[@]}"; do
    timeout "$CK_HANG" "$MPIEXEC" -np "$n" "${MPIFLAGS[@]}" "$SLUICE" build "$SRC/examples/reservoir.c" \
        -o "res-np$n.h5" -q >"build-np$n.log" 2>&1 || ck_not_ok "build on $n ranks" "$(tail -n 3 "build-np$n.log")"
done
models_agree res
solve_all res-np1.h5 res

# ---- a random sparse model imported from CSV ------------------------------------------------
PYTHONPATH=$SRC/tests/python "$PY" - <<'EOF' || ck_not_ok "write the random model CSV"
import mdp_common as mc
m = mc.random_mdp(seed=4711, n=3000, gamma=0.95, actions=(1, 5), successors=(1, 6), local_width=40,
                  jump_fraction=0.1)
mc.write_csv(m, "random.csv", shuffle_seed=7)
EOF
for n in "${RANKS[@]}"; do
    timeout "$CK_HANG" "$MPIEXEC" -np "$n" "${MPIFLAGS[@]}" "$SLUICE" import random.csv --discount 0.95 \
        -o "rnd-np$n.h5" -q >"import-np$n.log" 2>&1 || ck_not_ok "import on $n ranks" "$(tail -n 3 "import-np$n.log")"
done
models_agree rnd
solve_all rnd-np1.h5 rnd
ck_finish
