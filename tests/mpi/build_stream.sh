#!/bin/bash
# build_stream.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# `sluice build` writes the model a block of states at a time (a counting
# pass, then a pass that writes). The file must not depend on how the rows
# were cut: the reservoir example built in one block, in blocks of 1, 777
# and 20000 transitions, and on 2 and 3 ranks with blocks of 777, must be
# identical dataset by dataset (h5py: names, types, shapes, values, units)
# with the same root attributes and fingerprint; the build log must show
# that the small blocks really were many rounds; a streamed file must load
# (which recomputes its fingerprint from the file) and solve and verify.
# A generator that gives different rows in the two passes
# (tests/data/gen_unsteady.c) must fail with 65 and leave no file.

. "$(dirname "$0")/../cli/lib_ckpt.sh"
ck_init "$@"
ck_mpi_init

GEN=$SRC/examples/reservoir.c
P=(--param storage_levels=100 --param inflow_classes=6)

"$SLUICE" build "$GEN" "${P[@]}" -o one.h5 >one.log 2>&1
ck_rc "build in one block" 0 $?
grep -q "written in 1 rounds" one.log && ck_ok "the default block holds the whole small model (1 round)" ||
    ck_not_ok "the default build did not report 1 round" "$(grep rounds one.log)"

variants=()
for bt in 1 777 20000; do
    "$SLUICE" build "$GEN" "${P[@]}" --block-transitions $bt -o "b$bt.h5" >"b$bt.log" 2>&1
    ck_rc "build in blocks of $bt transitions" 0 $?
    variants+=("b$bt.h5")
done
for np in 2 3; do
    timeout "$CK_HANG" "$MPIEXEC" -np $np "${MPIFLAGS[@]}" "$SLUICE" build "$GEN" "${P[@]}" --block-transitions 777 \
        -o "np$np.h5" >"np$np.log" 2>&1 </dev/null
    ck_rc "build on $np ranks in blocks of 777 transitions" 0 $?
    variants+=("np$np.h5")
done
rounds=$(sed -n 's/.*written in \([0-9]*\) rounds.*/\1/p' b777.log)
if [ "${rounds:-0}" -gt 100 ]; then
    ck_ok "blocks of 777 transitions: $rounds rounds"
else
    ck_not_ok "blocks of 777 transitions: '${rounds}' rounds, expected more than 100" "$(tail -n 3 b777.log)"
fi

out=$("$PY" - one.h5 "${variants[@]}" <<'PYEOF'
import sys
import h5py
import numpy as np

def datasets(f):
    out = {}
    f.visititems(lambda n, o: out.__setitem__(n, o) if isinstance(o, h5py.Dataset) else None)
    return out

def same_attrs(x, y, skip=()):
    kx = {k: v for k, v in x.attrs.items() if k not in skip}
    ky = {k: v for k, v in y.attrs.items() if k not in skip}
    return kx.keys() == ky.keys() and all(np.array_equal(kx[k], ky[k]) for k in kx)

ref = h5py.File(sys.argv[1], "r")
dref = datasets(ref)
bad = 0
for path in sys.argv[2:]:
    f = h5py.File(path, "r")
    d = datasets(f)
    why = []
    if d.keys() != dref.keys():
        why.append("datasets %s" % sorted(set(d) ^ set(dref)))
    for n in sorted(d.keys() & dref.keys()):
        x, y = dref[n], d[n]
        if x.dtype != y.dtype or x.shape != y.shape or not np.array_equal(x[()], y[()]):
            why.append("%s differs" % n)
        elif not same_attrs(x, y):
            why.append("%s attributes differ" % n)
    if not same_attrs(ref, f, skip=("created_by",)):
        why.append("root attributes differ")
    print("%s: %s (%d datasets, fingerprint %s)" % (path, "; ".join(why) or "identical", len(d),
                                                     f.attrs["fingerprint"].decode()))
    bad |= bool(why)
sys.exit(1 if bad or len(dref) < 10 else 0)
PYEOF
)
rc=$?
while IFS= read -r line; do echo "#   $line"; done <<<"$out"
[ $rc -eq 0 ] && ck_ok "every streamed file equals the one-block file (h5py, dataset by dataset)" ||
    ck_not_ok "a streamed file differs from the one-block file" "see the lines above"

"$SLUICE" solve -q b777.h5 -o b777-sol.h5 --tolerance 1e-6
ck_rc "the file built in blocks of 777 loads (fingerprint recomputed) and solves" 0 $?
"$SLUICE" verify -q b777.h5 b777-sol.h5
ck_rc "... and its solution verifies" 0 $?

UN=$SRC/tests/data/gen_unsteady.c
for mode in 0 1; do
    rm -f "un$mode.h5"
    "$SLUICE" build -q "$UN" --param mode=$mode -o "un$mode.h5" >"un$mode.log" 2>&1
    rc=$?
    if [ $rc -eq 65 ] && grep -q "twice" "un$mode.log" && [ ! -e "un$mode.h5" ] &&
        [ -z "$(ls -A | grep -F "un$mode.h5." )" ]; then
        ck_ok "a generator whose rows change between runs (mode $mode): 65, no file: $(grep -m1 twice "un$mode.log" | cut -c1-150)"
    else
        ck_not_ok "unsteady generator mode $mode: exit $rc, file $(ls un$mode.h5* 2>/dev/null)" "$(tail -n 2 "un$mode.log")"
    fi
done
"$SLUICE" build -q "$UN" --param mode=2 -o un2.h5
ck_rc "the same generator when steady (mode 2) builds" 0 $?

ck_finish
