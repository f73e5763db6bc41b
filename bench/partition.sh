#!/bin/bash
# partition.sh - `sluice info MODEL --partition 64` and `--partition 1024`
# predictions for a large reservoir, and the time the prediction takes.
#
# usage: bench/partition.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#   TARGET_STATES="100000000 30000000 10000000 3000000"  sizes tried, largest first
#   MAX_BUILD_SECONDS=1200   a size is built only if its estimated build time is below this
#   PARTS="64 1024"
#
# A 10^8-state version is asked for. Whether it can be built here is decided
# from a calibration build of the 10^6-state reservoir on this machine
# (transitions per second, bytes on disk per transition, peak RSS per
# transition; `sluice build` holds a rank's whole block in memory, so the
# memory of all ranks on one node adds up to the same total), against the
# available memory, free disk and MAX_BUILD_SECONDS. The largest size that
# fits is built (storage_levels scaled, 20 inflow classes, 12 months) and
# the script says which one and why the larger ones were not.
. "$(dirname "$0")/lib.sh"
bench_init "$@"
TARGET_STATES=${TARGET_STATES:-100000000 30000000 10000000 3000000}
MAX_BUILD_SECONDS=${MAX_BUILD_SECONDS:-1200}
PARTS=${PARTS:-64 1024}
cd "$WORK" || exit 73
CACHE=$WORK/gen-cache
bench_machine | tee partition-machine.txt

# calibration: the 10^6-state build, timed
echo "calibration build of the 10^6-state reservoir ..."
# shellcheck disable=SC2086
bench_timed part.calib "$SLUICE" build "$SRC/examples/reservoir.c" --cache "$CACHE" $BIG_PARAMS -o "$BIG" ||
    { tail part.calib.err >&2; bench_fail "calibration build failed"; }
"$SLUICE" info "$BIG" --json >part.calib.info.json
bench_record_params

mem_avail=$(awk '/MemAvailable/ {print $2 * 1024}' /proc/meminfo)
disk_free=$(df -Pk "$WORK" | awk 'NR == 2 {print $4 * 1024}')
# shellcheck disable=SC2086  # one argument per size
choice=$(bench_python "$mem_avail" "$disk_free" "$MAX_BUILD_SECONDS" $TARGET_STATES 2>part.estimate.txt <<'EOF'
import json, sys
mem_avail, disk_free, max_s = float(sys.argv[1]), float(sys.argv[2]), float(sys.argv[3])
targets = [int(x) for x in sys.argv[4:]]
t = tv("part.calib.time")
info = json.JSONDecoder().raw_decode(open("part.calib.info.json").read())[0]
S, T = info["n_states"], info["n_transitions"]
tr_per_state = T / S
disk_per_tr = info["file_bytes"] / T
rss_per_tr = t["rss"] / T
rate_wall = T / t["wall"]
rate_cpu = T / (t["user"] + t["sys"])
log = sys.stderr
print("calibration (%d states, %d transitions): %.1f s wall, %.1f s CPU -> %.2f M transitions/s wall, %.2f M/CPU-s;"
      % (S, T, t["wall"], t["user"] + t["sys"], rate_wall / 1e6, rate_cpu / 1e6), file=log)
print("  %.2f B on disk and %.1f B of peak RSS per transition; %.2f transitions per state" %
      (disk_per_tr, rss_per_tr, tr_per_state), file=log)
print("  available: memory %.1f GB (MemAvailable), disk %.1f GB free, time limit %.0f s" %
      (mem_avail / 1e9, disk_free / 1e9, max_s), file=log)
print("%-12s %-8s %14s %10s %10s %12s %12s  %s" % ("states", "L", "transitions", "disk_GB", "RAM_GB", "build_s_wall",
                                                  "build_s_cpu", "feasible here?"), file=log)
chosen = None
for n in targets:
    L = max(2, round(n / (20 * 12)))
    ns = L * 20 * 12
    nt = ns * tr_per_state
    disk, ram = nt * disk_per_tr, nt * rss_per_tr
    sw, sc = nt / rate_wall, nt / rate_cpu
    why = []
    if ram > 0.8 * mem_avail:
        why.append("memory: needs %.0f GB, %.0f GB available" % (ram / 1e9, mem_avail / 1e9))
    if disk > 0.8 * disk_free:
        why.append("disk: needs %.0f GB, %.0f GB free" % (disk / 1e9, disk_free / 1e9))
    if min(sw, sc) > max_s:
        why.append("time: %.0f-%.0f s > %.0f s" % (sc, sw, max_s))
    ok = not why
    print("%-12d %-8d %14.3g %10.1f %10.1f %12.0f %12.0f  %s" % (ns, L, nt, disk / 1e9, ram / 1e9, sw, sc,
                                                                "yes" if ok else "no (" + "; ".join(why) + ")"),
          file=log)
    if ok and chosen is None:
        chosen = L
print(chosen if chosen is not None else 0)
EOF
)
cat part.estimate.txt
{ [ -n "$choice" ] && [ "$choice" != 0 ]; } || bench_fail "no size in TARGET_STATES can be built here"
NS=$((choice * 20 * 12))
LARGE=$WORK/large-$NS.h5
echo "building the largest feasible size: storage_levels=$choice (x 20 x 12 = $NS states) ..."
bench_timed part.build "$SLUICE" build "$SRC/examples/reservoir.c" --cache "$CACHE" \
    --param storage_levels="$choice" --param inflow_classes=20 -o "$LARGE" ||
    { tail part.build.err >&2; bench_fail "building $LARGE failed"; }
"$SLUICE" info "$LARGE" --json >part.large.info.json
for n in $PARTS; do
    echo "sluice info --partition $n ..."
    bench_timed "part.info.$n" "$SLUICE" info "$LARGE" --partition "$n" ||
        bench_fail "sluice info --partition $n failed"
    bench_timed "part.json.$n" "$SLUICE" info "$LARGE" --partition "$n" --json ||
        bench_fail "sluice info --partition $n --json failed"
done

# shellcheck disable=SC2086  # one argument per rank count
bench_python "$LARGE" $PARTS <<'EOF'
import json, sys
large, parts = sys.argv[1], [int(x) for x in sys.argv[2:]]

def docs(path):
    text, out, i = open(path).read(), [], 0
    dec = json.JSONDecoder()
    while True:
        while i < len(text) and text[i].isspace():
            i += 1
        if i >= len(text):
            return out
        d, i = dec.raw_decode(text, i)
        out.append(d)

info = docs("part.large.info.json")[0]
b = tv("part.build.time")
T = info["n_transitions"]
print()
print("model %s: %d states, %d pairs, %d transitions, %.2f GB on disk" % (
    large.rsplit("/", 1)[-1], info["n_states"], info["n_pairs"], T, info["file_bytes"] / 1e9))
print("build: %.1f s wall, %.1f s CPU (%.2f M transitions/s wall, %.2f M/CPU-s), peak RSS %.2f GB" % (
    b["wall"], b["cpu"], T / b["wall"] / 1e6, T / b["cpu"] / 1e6, b["rss"] / 1e9))
print()
hdr = "%-6s %10s %10s %12s %14s %12s %10s %12s %12s %12s" % (
    "ranks", "states/rk", "halo_max", "halo_total", "MB_exch/sweep", "halo/states", "imbalance", "mem_est_MB",
    "pred_wall_s", "pred_rss_MB")
print(hdr)
print("-" * len(hdr))
for n in parts:
    p = docs("part.json.%d" % n + ".out")[-1]
    t = tv("part.info.%d.time" % n)
    ps = p["parts"]
    mem = max(x["memory_bytes_estimate"] for x in ps)
    print("%-6d %10.0f %10d %12d %14.2f %12.3f %10.4f %12.1f %12.2f %12.0f" % (
        n, info["n_states"] / n, p["halo_max"], p["halo_total"], p["bytes_exchanged_per_sweep"] / 1e6,
        p["halo_total"] / info["n_states"], p["transition_imbalance"], mem / 1e6, t["wall"], t["rss"] / 1e6))
print()
print("halo/states: total halo entries / states (each rank receives that many values per sweep, summed);")
print("mem_est_MB: largest rank, info's estimate (16 B/transition + 40 B/state + 16 B/halo entry; pairs not")
print("included); pred_wall_s / pred_rss_MB: time and peak RSS of the `sluice info --partition N` command itself.")
EOF
