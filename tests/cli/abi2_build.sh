# abi2_build.sh - generator ABI 2 and model format 2 at the command line:
# `sluice info GENERATOR.c`, an ABI 1 object still building (a frozen copy of
# the ABI 1 header in tests/data/abi1), format 2 annotations in the file and
# under the fingerprint, and bad units/labels/quantities refused with a clear
# error, exit 65 and no output file.
# usage: bash abi2_build.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

RES=$SRC/examples/reservoir.c
BAD=$DATA/gen_bad_units.c
CC=${CC:-cc}

# ---- info before building
expect "info GENERATOR.c lists parameters with defaults, units and help" --code 0 \
    --out "storage_levels" --out "hm3/month" --out "largest release (turbine capacity)" \
    --out "spill" --out "Jan, Feb" --out "reward       kCU" -- "$SLUICE" info "$RES"
expect "info of a generator that does not compile" --code 65 --err "gen_no_compile.c" -- \
    "$SLUICE" info "$DATA/gen_no_compile.c"
expect "info GENERATOR.c refuses --json" --code 64 --err "--json" -- "$SLUICE" info "$RES" --json

# ---- an object compiled against the ABI 1 header still loads, and gives the
# same model (format 1, same fingerprint) as the source built against ABI 2
if "$CC" -std=c11 -O2 -fPIC -shared -I"$DATA/abi1" -o "$W/two_state_abi1.so" "$SRC/examples/two_state.c"; then
    expect "ABI 1 object builds" --code 0 -- "$SLUICE" build -q "$W/two_state_abi1.so" -o "$W/abi1.h5"
    expect "ABI 1 source builds against the ABI 2 header" --code 0 -- \
        "$SLUICE" build -q "$SRC/examples/two_state.c" -o "$W/abi2src.h5"
    if py 'import h5py,sys
a=h5py.File(sys.argv[1]); b=h5py.File(sys.argv[2])
ok = a.attrs["format_version"] == 1 and b.attrs["format_version"] == 1 and a.attrs["fingerprint"] == b.attrs["fingerprint"]
sys.exit(0 if ok else 1)' "$W/abi1.h5" "$W/abi2src.h5"; then
        note_ok "ABI 1 object and ABI 2 compile give the same format 1 model"
    else
        note_fail "ABI 1 object and ABI 2 compile give the same format 1 model" "format or fingerprint differ"
    fi
else
    note_fail "compile two_state.c against the ABI 1 header" "$CC failed"
fi

# ---- format 2 content and fingerprint
expect "reservoir builds as format 2" --code 0 -- "$SLUICE" build -q "$RES" -o "$W/res.h5"
expect "info shows format 2" --code 0 --out "format 2" -- "$SLUICE" info "$W/res.h5"
expect "mill pond (mode 0) builds" --code 0 -- "$SLUICE" build -q "$BAD" -o "$W/pond.h5"
# the pond's quantities are known by hand: overflow = 1 hm3 exactly when the
# level is 1 and the gate is shut (action 0); gate_flow = 1.5 hm3 when open
if py 'import h5py,sys,numpy as np
f=h5py.File(sys.argv[1]); fp=f["state/first_pair"][:]; act=f["pair/action"][:]
ov=f["quantity/overflow/mean"][:]; op=f["quantity/overflow/p_positive"][:]; gf=f["quantity/gate_flow/mean"][:]
for s in range(6):
    for k in range(fp[s], fp[s+1]):
        want = 1.0 if (s % 2 == 1 and act[k] == 0) else 0.0
        if ov[k] != want or op[k] != want or gf[k] != (1.5 if act[k] == 1 else 0.0): sys.exit(1)
ok = (f.attrs["format_version"] == 2 and f.attrs["period_unit"] == b"week"
      and list(f["factor/season/label"][:]) == [b"dry", b"wet", b"flood"]
      and f["action/value"].attrs["unit"] == b"hm3/week" and f["quantity/overflow/mean"].attrs["unit"] == b"hm3")
sys.exit(0 if ok else 1)' "$W/pond.h5"; then
    note_ok "mill pond: quantities, labels and units as written by hand"
else
    note_fail "mill pond: quantities, labels and units as written by hand" "file content differs"
fi
expect "solve the reservoir" --code 0 -- "$SLUICE" solve -q "$W/res.h5" -o "$W/sol.h5"
for what in "quantity/spill/p_positive" "quantity/energy/mean" "factor/storage/value" "action/value"; do
    cp "$W/res.h5" "$W/tampered.h5"
    py 'import h5py,sys
f=h5py.File(sys.argv[1],"r+"); d=f[sys.argv[2]]; x=d[:]; x[1]=x[1]+0.25 if x[1]<0.5 else x[1]-0.25; d[:]=x' \
        "$W/tampered.h5" "$what"
    expect "fingerprint covers /$what" --code 65 --err "fingerprint" -- \
        "$SLUICE" verify -q "$W/tampered.h5" "$W/sol.h5"
done

# ---- bad annotations: exit 65, the thing named, no model file
bad() { # bad NAME MODE WORD...
    local name=$1 mode=$2
    shift 2
    local e=()
    for k in "$@"; do e+=(--err "$k"); done
    expect "bad annotation: $name" --code 65 --err "gen_bad_units.c" "${e[@]}" --gone "$W/bad.h5" -- \
        "$SLUICE" build -q "$BAD" --param mode="$mode" -o "$W/bad.h5"
}
bad "duplicate factor label" 1 "season" "dry" "twice"
bad "quantity name with a space" 2 "over flow" "identifier"
bad "quantity named like a --show keyword" 3 "value" "reserved"
bad "successor emitted without quantities" 4 "state 3" "action 1" "sluice_emit_outcome"
bad "NaN quantity" 5 "state 3" "action 1" "not finite"
bad "NaN factor value" 6 "level" "index 1" "not finite"
bad "quantity declared twice" 7 "overflow" "twice"
sl_finish
