#!/bin/bash
# big10m.sh - a 10^7-state reservoir end to end: build, solve to 1e-6, verify.
# Prints wall time, CPU time and peak RSS of each step, the model's size, and
# peak RSS per transition of the build (the figure `sluice build` streaming
# is meant to bring down), with the load average before and after each step.
#
#     bench/big10m.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#
# Environment:
#     BIG10M_PARAMS  generator parameters (default: storage_levels=41667,
#                    inflow_classes=20: 41667 x 20 x 12 = 10,000,080 states)
#     METHOD         solve method (default gs)
#     MAX_LOAD       refuse to start above this 1-minute load average
#                    (default 4: the timings would mean little on a machine
#                    that busy); FORCE=1 runs anyway
# The build streams the model to the file (a few hundred MB whatever the
# model's size); the solve holds the model, about 26 bytes of peak RSS per
# transition (1249 MB for 50.2 M transitions in bench/solve.sh, gs). The
# script estimates the transitions from a small build of the same generator
# and stops if MemAvailable or the free disk cannot hold them.
# Time: roughly 20x bench/build.sh + bench/solve.sh (gs) on the 10^6 model.
. "$(dirname "$0")/lib.sh"
bench_init "$@"

PARAMS=${BIG10M_PARAMS:-"--param storage_levels=41667 --param inflow_classes=20"}
METHOD=${METHOD:-gs}
MODEL=$WORK/big10m.h5
MAX_LOAD=${MAX_LOAD:-4}

load1() { cut -d' ' -f1 /proc/loadavg; }
if [ "${FORCE:-0}" != 1 ] && awk -v l="$(load1)" -v m="$MAX_LOAD" 'BEGIN { exit !(l > m) }'; then
    echo "$0: load average $(load1) is above $MAX_LOAD: not starting (FORCE=1 runs anyway)" >&2
    exit 75
fi
bench_machine

# ---- estimate from a small build of the same generator: transitions per state
small=$WORK/big10m-probe.h5
# shellcheck disable=SC2086
"$SLUICE" build "$SRC/examples/reservoir.c" --param storage_levels=400 \
    $(echo "$PARAMS" | grep -o -- '--param inflow_classes=[0-9]*') --cache "$WORK/gen-cache" -q -o "$small" ||
    bench_fail "probe build failed"
read -r ps pt < <("$PYTHON" - "$small" <<'PYEOF'
import sys, h5py
with h5py.File(sys.argv[1], "r") as f:
    print(int(f.attrs["n_states"]), int(f.attrs["n_transitions"]))
PYEOF
)
levels=$(echo "$PARAMS" | grep -o 'storage_levels=[0-9]*' | cut -d= -f2)
states=$(awk -v p="$ps" -v l="$levels" 'BEGIN { printf "%.0f", p / 400 * l }')
trans=$(awk -v p="$ps" -v t="$pt" -v s="$states" 'BEGIN { printf "%.0f", t / p * s }')
need_solve=$(awk -v t="$trans" 'BEGIN { printf "%.1f", 26 * t / 2^30 }')
avail=$(awk '/MemAvailable/ { printf "%.1f", $2 / 2^20 }' /proc/meminfo)
disk=$(df -k --output=avail "$WORK" | tail -n 1 | awk '{ printf "%.1f", $1 / 2^20 }')
file_est=$(awk -v t="$trans" -v s="$states" 'BEGIN { printf "%.1f", (12 * t + 20 * t / 5 + 8 * s) / 2^30 }')
echo "model: reservoir $PARAMS: about $states states, $trans transitions (from the probe);" \
     "solve needs about $need_solve GiB (26 B/transition), $avail GiB available; file about $file_est GiB, $disk GiB free"
awk -v n="$need_solve" -v a="$avail" 'BEGIN { exit !(n > 0.9 * a) }' &&
    bench_fail "not enough memory for the solve ($need_solve GiB needed, $avail GiB available)"
awk -v n="$file_est" -v a="$disk" 'BEGIN { exit !(n > 0.9 * a) }' &&
    bench_fail "not enough disk for the model ($file_est GiB, $disk GiB free)"

# ---- the three steps
row() { # row STEP PREFIX STATUS
    printf '| %-7s | %8s | %8s | %9.2f | %s | %s |\n' "$1" "$(bench_tv "$2.time" wall)" "$(bench_tv "$2.time" cpu)" \
        "$(awk -v r="$(bench_tv "$2.time" rss)" 'BEGIN { print r / 1024 }')" "$3" "$4"
}
rows=()
l0=$(load1)
# shellcheck disable=SC2086
bench_timed "$WORK/big10m.build" "$SLUICE" build "$SRC/examples/reservoir.c" $PARAMS --cache "$WORK/gen-cache" \
    -o "$MODEL"
rc_b=$?
rows+=("$(row build "$WORK/big10m.build" "exit $rc_b" "load $l0 -> $(load1)")")
[ $rc_b -eq 0 ] || bench_fail "build failed (exit $rc_b): $(tail -n 2 "$WORK/big10m.build.err")"
read -r ns np nt < <("$PYTHON" - "$MODEL" <<'PYEOF'
import sys, h5py
with h5py.File(sys.argv[1], "r") as f:
    print(int(f.attrs["n_states"]), int(f.attrs["n_pairs"]), int(f.attrs["n_transitions"]))
PYEOF
)
l0=$(load1)
bench_timed "$WORK/big10m.solve" "$SLUICE" solve "$MODEL" -o "$WORK/big10m.sol.h5" --method "$METHOD" \
    --tolerance 1e-6 --report "$WORK/big10m.solve.json" --progress-every 60
rc_s=$?
rows+=("$(row solve "$WORK/big10m.solve" "exit $rc_s" "load $l0 -> $(load1)")")
l0=$(load1)
bench_timed "$WORK/big10m.verify" "$SLUICE" verify "$MODEL" "$WORK/big10m.sol.h5"
rc_v=$?
rows+=("$(row verify "$WORK/big10m.verify" "exit $rc_v" "load $l0 -> $(load1)")")

echo
echo "model $MODEL: $ns states, $np pairs, $nt transitions; file $(du -m "$MODEL" | cut -f1) MB"
echo "| step    |   wall s |    CPU s | peak GiB | status | load before -> after |"
echo "|---|---|---|---|---|---|"
printf '%s\n' "${rows[@]}"
echo "build: peak RSS $(awk -v r="$(bench_tv "$WORK/big10m.build.time" rss)" -v t="$nt" \
    'BEGIN { printf "%.1f", r * 1048576 / t }') bytes per transition"
grep -h "iterations\|certificate\|result" "$WORK/big10m.solve.err" | tail -n 3
[ $rc_s -eq 0 ] && [ $rc_v -eq 0 ]
