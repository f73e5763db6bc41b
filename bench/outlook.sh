#!/bin/bash
# outlook.sh - `sluice outlook` for STAGES (default 120) monthly stages on the
# ~10^6-state reservoir, 1 and 2 ranks: seconds per stage beside the seconds
# of one Jacobi sweep measured in the same run, and peak RSS per rank.
#
# usage: bench/outlook.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#   STAGES=120  RANKS="1 2"  SWEEPS=20 (Jacobi sweeps of the policy run)
#   MODEL_PARAMS="--param ..." for a smaller trial model
#
# The policy comes from a Jacobi run stopped after SWEEPS sweeps (any policy
# costs the same to propagate); its report gives seconds per Jacobi sweep.
# Seconds per outlook stage = the stage loop's own clock ("seconds" in the
# JSON, loading excluded) / STAGES; the wall-clock difference between a
# STAGES-stage and a 0-stage run is printed beside it. Expected: about one fixed-policy sweep per
# stage, i.e. a fraction (1 / actions per state) of a Jacobi sweep's
# transitions, plus an O(n_states) exchange per rank (docs/results.md).
. "$(dirname "$0")/lib.sh"
bench_init "$@"
STAGES=${STAGES:-120}
RANKS=${RANKS:-1 2}
SWEEPS=${SWEEPS:-20}
cd "$WORK" || exit 73
bench_machine | tee outlook-machine.txt
bench_big

for np in $RANKS; do
    bench_timed_ranks "ol.policy.$np" "$np" "$SLUICE" solve "$BIG" -o "ol.policy.$np.h5" --method jacobi \
        --max-iterations "$SWEEPS" --report "ol.policy.$np.json" --progress-every 1000
    rc=$?
    [ $rc = 0 ] || [ $rc = 75 ] || { tail "ol.policy.$np.err" >&2; bench_fail "policy run on $np ranks failed ($rc)"; }
    start=$("$PYTHON" -c 'import h5py,sys; f=h5py.File(sys.argv[1]); n=f["factor/storage/value"].shape[0]; print("storage@%d,inflow@%d,month=Jan" % (n // 2, f["factor/inflow/value"].shape[0] // 2))' "$BIG") ||
        bench_fail "cannot read the factor sizes of $BIG (format 2 model expected)"
    for n in 0 "$STAGES"; do
        bench_timed_ranks "ol.$np.$n" "$np" "$SLUICE" outlook "$BIG" "ol.policy.$np.h5" --start "$start" \
            --stages "$n" --json -o "ol.$np.$n.json" ||
            { tail "ol.$np.$n.err" >&2; bench_fail "outlook of $n stages on $np ranks failed"; }
    done
done

bench_python "$STAGES" $RANKS <<'PYEOF'
import json, re, sys, glob

stages = int(sys.argv[1])
ranks = [int(x) for x in sys.argv[2:]]


print("outlook: %d stages; 's/stage' = the stage loop's own clock / N; 'sweep' = one Jacobi sweep from the policy run's report" % stages)
print("%5s %12s %12s %8s %16s %16s" % ("ranks", "s/stage", "s/sweep", "ratio", "peak RSS/rank MB", "s/stage (wall)"))
for np_ in ranks:
    rep = json.load(open("ol.policy.%d.json" % np_))
    h = rep["history"]
    if len(h) >= 2 and h[-1]["sweeps"] > h[0]["sweeps"]:
        sweep = (h[-1]["seconds"] - h[0]["seconds"]) / (h[-1]["sweeps"] - h[0]["sweeps"])
    else:
        sweep = rep["seconds"] / max(1, rep["sweeps"])
    w0 = tv("ol.%d.0.time" % np_)["wall"]
    wn = tv("ol.%d.%d.time" % (np_, stages))["wall"]
    per = json.load(open("ol.%d.%d.json" % (np_, stages)))["seconds"] / stages
    perw = (wn - w0) / stages
    rss = max(tv(p)["rss"] / 1048576 for p in glob.glob("ol.%d.%d.time.*" % (np_, stages)))
    print("%5d %12.4g %12.4g %8.2f %16.0f %16.4g" % (np_, per, sweep, per / sweep if sweep > 0 else float("nan"), rss, perw))
PYEOF
