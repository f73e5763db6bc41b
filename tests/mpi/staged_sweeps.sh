#!/bin/bash
# staged_sweeps.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# The stage-interleaved layout (src/parallel/stages.c): a model with a stage
# factor is renumbered at load so every rank holds a share of every stage,
# and gs sweeps stage by stage on all ranks with a halo exchange after each
# stage. Checked here (counts and values, never time):
#   * tests/data/staged_ferry.c with the stage factor fastest, in the middle
#     and slowest (the same model up to the state numbering), no transition
#     within a season: gs on 1, 2, 3 and 4 ranks (oversubscribed) needs the
#     same number of sweeps as on 1 rank, and gives bitwise the same values
#     and policy; and the three numberings give bitwise the same values once
#     mapped back to (fuel, season, berth);
#   * the same values agree with an independent numpy value iteration read
#     with h5py (Puterman 1994, Thm 6.3.1: value iteration converges to v*;
#     stopping rule Thm 6.6.3 / MacQueen bounds) within 2 * tolerance;
#   * with transitions that stay within a season (stay=0.3) the iterates may
#     differ between rank counts; every count certifies and the values agree
#     within 2 * tolerance;
#   * the reservoir example (month slowest): the same sweep count and bitwise
#     the same values on 1, 2 and 3 ranks;
#   * the model file is not changed by the renumbering (fingerprint recorded
#     in the solutions equals the file's).

. "$(dirname "$0")/../cli/lib_ckpt.sh"
ck_init "$@"
ck_mpi_init

RANKS=(1 2 3 4)
TOL=1e-9

# solve_counts MODEL NAME [RANKS...]: solve with gs on each rank count;
# prints nothing, records NAME-npN.h5 / .json; failures are reported
solve_counts() {
    local model=$1 name=$2 n rc tol=${SOLVE_TOL:-$TOL}
    shift 2
    for n in "$@"; do
        timeout "$CK_HANG" "$MPIEXEC" -np "$n" "${MPIFLAGS[@]}" "$SLUICE" solve "$model" -o "$name-np$n.h5" --method gs \
            --tolerance "$tol" --report "$name-np$n.json" -q >"$name-np$n.log" 2>&1
        rc=$?
        [ $rc = 0 ] || { ck_not_ok "$name: gs on $n ranks: exit $rc" "$(tail -n 3 "$name-np$n.log" | tr '\n' ' ')"; }
    done
}

sweeps_of() {
    "$PY" -c 'import json, sys; print(json.load(open(sys.argv[1]))["sweeps"])' "$1" 2>/dev/null || echo "?"
}

# same_counts NAME RANKS...: every rank count needs the 1-rank sweep count
same_counts() {
    local name=$1 n s1 s
    shift
    s1=$(sweeps_of "$name-np1.json")
    for n in "$@"; do
        [ "$n" = 1 ] && continue
        s=$(sweeps_of "$name-np$n.json")
        if [ "$s" = "$s1" ] && [ "$s1" != "?" ]; then
            ck_ok "$name: $n ranks need the 1-rank sweep count ($s)"
        else
            ck_not_ok "$name: $n ranks need $s sweeps, 1 rank $s1"
        fi
    done
}

# ---- the ferry model at three stage positions ---------------------------------------------------
for pos in 0 1 2; do
    "$SLUICE" build "$SRC/tests/data/staged_ferry.c" --param stage_position=$pos -o "ferry$pos.h5" -q \
        >"build$pos.log" 2>&1 || ck_not_ok "build staged_ferry.c with stage_position=$pos" "$(tail -n 3 "build$pos.log")"
    solve_counts "ferry$pos.h5" "ferry$pos" "${RANKS[@]}"
    same_counts "ferry$pos" "${RANKS[@]}"
done

if out=$("$PY" - "$TOL" <<'EOF' 2>&1
import sys
import h5py
import numpy as np

tol = float(sys.argv[1])
F, S, B = 30, 6, 4          # staged_ferry.c defaults


def canon(pos, a):
    """map a per-state array of stage_position=pos to index (f, s, b)"""
    x = np.arange(F * S * B)
    if pos == 0:
        s, f, b = x % S, (x // S) % F, x // (S * F)
    elif pos == 1:
        f, s, b = x % F, (x // F) % S, x // (F * S)
    else:
        f, b, s = x % F, (x // F) % B, x // (F * B)
    out = np.empty((F, S, B), a.dtype)
    out[f, s, b] = a
    return out


bad = []
ref_v = ref_p = None
for pos in (0, 1, 2):
    with h5py.File(f"ferry{pos}.h5", "r") as m:
        fp = m.attrs["fingerprint"]
    for n in (1, 2, 3, 4):
        with h5py.File(f"ferry{pos}-np{n}.h5", "r") as h:
            v, p = canon(pos, h["/value"][...]), canon(pos, h["/policy"][...])
            if h.attrs["model_fingerprint"] != fp:
                bad.append(f"pos {pos} np {n}: solution names another fingerprint")
        if ref_v is None:
            ref_v, ref_p = v, p
        elif not (np.array_equal(v.view(np.uint64), ref_v.view(np.uint64)) and np.array_equal(p, ref_p)):
            bad.append(f"pos {pos} np {n}: max |dv| {np.max(np.abs(v - ref_v)):.3g}, "
                       f"{int(np.sum(p != ref_p))} policy entries differ")

# independent value iteration on the file's arrays (numpy only)
with h5py.File("ferry1.h5", "r") as m:
    fp_ = m["/state/first_pair"][...]
    act = m["/pair/action"][...]
    rew = m["/pair/reward"][...]
    ft = m["/pair/first_transition"][...]
    tg = m["/transition/target"][...].astype(np.int64)
    pr = m["/transition/probability"][...]
    g = float(m.attrs["discount"])
n = len(fp_) - 1
pair_of_t = np.repeat(np.arange(len(rew)), np.diff(ft))
state_of_p = np.repeat(np.arange(n), np.diff(fp_))
v = np.zeros(n)
for it in range(20000):
    q = rew + g * np.bincount(pair_of_t, weights=pr * v[tg], minlength=len(rew))
    tv = np.full(n, -np.inf)
    np.maximum.at(tv, state_of_p, q)
    d = tv - v
    v = tv
    if g / (1 - g) * (d.max() - d.min()) < 1e-3 * tol:
        break
v = v + g / (1 - g) * 0.5 * (d.max() + d.min())
with h5py.File("ferry1-np1.h5", "r") as h:
    err = np.max(np.abs(h["/value"][...] - v))
if not err <= 2 * tol:
    bad.append(f"numpy value iteration differs by {err:.3g} (> 2 * {tol:g})")
print("; ".join(bad) if bad else f"bitwise equal over 3 numberings x 4 rank counts; numpy reference within {err:.2g}")
sys.exit(1 if bad else 0)
EOF
); then
    ck_ok "ferry: $out"
else
    ck_not_ok "ferry values" "$out"
fi

# ---- transitions within a stage: iterates may differ, answers agree ------------------------------
"$SLUICE" build "$SRC/tests/data/staged_ferry.c" --param stay=0.3 -o stay.h5 -q >build-stay.log 2>&1 ||
    ck_not_ok "build staged_ferry.c with stay=0.3" "$(tail -n 3 build-stay.log)"
solve_counts stay.h5 stay 1 2 3
for n in 2 3; do
    if out=$(ck_tool close stay.h5 stay-np1.h5 "stay-np$n.h5" "$(awk -v t=$TOL 'BEGIN{print 2*t}')" 1e-9); then
        ck_ok "stay=0.3: $n ranks vs 1 ($(sweeps_of "stay-np$n.json") vs $(sweeps_of stay-np1.json) sweeps): $out"
    else
        ck_not_ok "stay=0.3: $n ranks vs 1" "$out"
    fi
done

# ---- the reservoir example, month slowest ---------------------------------------------------------
"$SLUICE" build "$SRC/examples/reservoir.c" --param storage_levels=120 --param inflow_classes=6 -o res.h5 -q \
    >build-res.log 2>&1 || ck_not_ok "build reservoir" "$(tail -n 3 build-res.log)"
# (1e-9 is below this model's roundoff floor)
SOLVE_TOL=1e-6 solve_counts res.h5 res 1 2 3
same_counts res 1 2 3
for n in 2 3; do
    if "$PY" -c '
import sys, h5py, numpy as np
a, b = (h5py.File(p, "r") for p in sys.argv[1:3])
ok = np.array_equal(a["/value"][...], b["/value"][...]) and np.array_equal(a["/policy"][...], b["/policy"][...])
sys.exit(0 if ok else 1)' res-np1.h5 "res-np$n.h5"; then
        ck_ok "reservoir: $n ranks give bitwise the 1-rank values and policy"
    else
        ck_not_ok "reservoir: $n ranks differ from 1 rank"
    fi
done
ck_finish
