#!/bin/bash
# build.sh - how fast `sluice build` writes the ~10^6-state reservoir, how
# small the file is and how much memory the build takes; 1 rank and 2 ranks.
#
# usage: bench/build.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#   REPS=N   repetitions of each build (default 2; the best wall time counts)
#
# Targets: >= 5 M transitions/s on one core with compression on (compression
# is always on: shuffle + deflate level 1 on every large dataset); file <=
# 40% of raw, raw = 12 B per transition (8-byte probability + 4-byte target)
# + 20 B per pair (4-byte action, 8-byte reward, 8-byte first_transition)
# + 8 B per state (first_pair).
. "$(dirname "$0")/lib.sh"
bench_init "$@"
REPS=${REPS:-2}
cd "$WORK" || exit 73
CACHE=$WORK/gen-cache
bench_machine | tee build-machine.txt

# 1. parameter names: a small build, then `sluice info` must list
#    storage_levels and inflow_classes with the values given.
"$SLUICE" build "$SRC/examples/reservoir.c" --cache "$CACHE" -q \
    --param storage_levels=40 --param inflow_classes=4 -o small.h5 ||
    bench_fail "small build failed"
"$SLUICE" info small.h5 >small.info
if ! grep -Eq '^ *storage_levels +40 ' small.info || ! grep -Eq '^ *inflow_classes +4 ' small.info; then
    bench_fail "sluice info small.h5 does not list storage_levels=40 and inflow_classes=4 (parameter names changed?)"
fi
echo "parameter names checked on a small build: storage_levels, inflow_classes"

# 2. the big build, 1 rank (generator already compiled into the cache, so
#    the time is enumeration + validation + fingerprint + compressed write)
for r in $(seq 1 "$REPS"); do
    # shellcheck disable=SC2086
    bench_timed "build1.$r" "$SLUICE" build "$SRC/examples/reservoir.c" --cache "$CACHE" \
        $BIG_PARAMS -o "$BIG" || { cat "build1.$r.err" >&2; bench_fail "1-rank build failed"; }
    bench_record_params
    "$SLUICE" info "$BIG" --json >"build1.$r.info.json"
    echo "1 rank, run $r: $(bench_tv "build1.$r.time" wall) s wall"
done

# 2b. memory against size: the same generator with a quarter of the storage
#     levels (about a quarter of the transitions), 1 rank. A build that
#     streams to the file holds a few blocks, so its peak RSS should barely
#     change between the two sizes; one that holds the model grows with it.
SMALL_PARAMS=${SMALL_PARAMS:-$(echo "$BIG_PARAMS" | awk '{ for (i = 1; i <= NF; i++) if ($i ~ /^storage_levels=/) { split($i, a, "="); $i = "storage_levels=" int(a[2] / 4) } print }')}
# shellcheck disable=SC2086
bench_timed "build_quarter" "$SLUICE" build "$SRC/examples/reservoir.c" --cache "$CACHE" \
    $SMALL_PARAMS -o quarter.h5 || { cat "build_quarter.err" >&2; bench_fail "quarter-size build failed"; }
"$SLUICE" info quarter.h5 --json >"build_quarter.info.json"
echo "quarter size ($SMALL_PARAMS): $(bench_tv build_quarter.time wall) s wall"

# 3. the same under mpirun -np 2 (one time report per rank)
for r in $(seq 1 "$REPS"); do
    # shellcheck disable=SC2086
    bench_timed_ranks "build2.$r" 2 "$SLUICE" build "$SRC/examples/reservoir.c" --cache "$CACHE" \
        $BIG_PARAMS -o big2.h5 || { cat "build2.$r.err" >&2; bench_fail "2-rank build failed"; }
    "$SLUICE" info big2.h5 --json >"build2.$r.info.json"
    echo "2 ranks, run $r: $(bench_tv "build2.$r.time" wall) s wall"
done

bench_python "$REPS" <<'EOF'
import json, re, sys

reps = int(sys.argv[1])

def first_json(path):
    text = open(path).read()
    return json.JSONDecoder().raw_decode(text)[0]

def phases(errpath):
    """(seconds of the counting pass on rank 0, seconds of the writing pass
    (enumerate again, hash, compress, write) on rank 0)"""
    count = write = None
    for line in open(errpath):
        m = re.search(r"build: (counting )?(\d+)/(\d+) states \(rank 0\), (\d+) states/s", line)
        if m and m.group(2) == m.group(3):
            t = int(m.group(2)) / float(m.group(4))
            if m.group(1):
                count = t
            else:
                write = t
    return count, write

rows = []
for ranks in (1, 2):
    for r in range(1, reps + 1):
        p = "build%d.%d" % (ranks, r)
        t = tv(p + ".time")
        per_rank = [tv("%s.time.%d" % (p, k)) for k in range(ranks)] if ranks > 1 else [t]
        info = first_json(p + ".info.json")
        enum, write = phases(p + ".err")
        rows.append(dict(ranks=ranks, run=r, t=t, per_rank=per_rank, info=info, enum=enum, write=write))

info = rows[0]["info"]
S, P, T = info["n_states"], info["n_pairs"], info["n_transitions"]
raw = 12 * T + 20 * P + 8 * (S + 1)
fb = info["file_bytes"]
print()
print("model: %d states, %d pairs, %d transitions" % (S, P, T))
print("file: %.1f MB on disk; raw %.1f MB (12 B/transition + 20 B/pair + 8 B/state): %.1f%% of raw (target <= 40%%)"
      % (fb / 1e6, raw / 1e6, 100.0 * fb / raw))
print("fingerprints: 1 rank %s, 2 ranks %s (%s)" % (
    rows[0]["info"]["fingerprint"], rows[reps]["info"]["fingerprint"],
    "identical" if rows[0]["info"]["fingerprint"] == rows[reps]["info"]["fingerprint"] else "DIFFERENT"))
print()
hdr = "%-6s %-4s %8s %8s %8s %9s %9s %10s %10s %10s" % (
    "ranks", "run", "wall_s", "cpu_s", "count_s", "write_s", "Mtr/s", "Mtr/cpu-s", "rss_MB", "rss/rank")
print(hdr)
print("-" * len(hdr))
for x in rows:
    t = x["t"]
    write = x["write"] if x["write"] is not None else float("nan")
    cpu = sum(pr["cpu"] for pr in x["per_rank"]) if x["ranks"] > 1 else t["cpu"]
    rss = [pr["rss"] / 1e6 for pr in x["per_rank"]]
    print("%-6d %-4d %8.2f %8.2f %8.2f %9.2f %9.2f %10.2f %10.0f %10s" % (
        x["ranks"], x["run"], t["wall"], cpu, x["enum"] or float("nan"), write,
        T / t["wall"] / 1e6, T / cpu / 1e6, max(rss), "/".join("%.0f" % v for v in rss)))
print()
print("wall_s: whole command (process start to exit); cpu_s: user+sys summed over ranks;")
print("count_s: rank 0's counting pass (enumerate, count); write_s: its writing pass (enumerate again,")
print("hash, compress, write a block at a time);")
print("Mtr/s: million transitions per wall second; Mtr/cpu-s: per CPU second (what one core does")
print("when it is not shared); rss: peak resident set (GNU time), per rank under mpirun.")
b1 = min((x for x in rows if x["ranks"] == 1), key=lambda x: x["t"]["wall"])
b2 = min((x for x in rows if x["ranks"] == 2), key=lambda x: x["t"]["wall"])
print()
print("best 1 rank: %.2f M transitions/s wall, %.2f M/CPU-s (target >= 5 M/s on one core)"
      % (T / b1["t"]["wall"] / 1e6, T / b1["t"]["cpu"] / 1e6))
print("ratio wall(1 rank) / wall(2 ranks) = %.2f; peak RSS 1 rank %.0f MB, largest rank of 2 %.0f MB"
      % (b1["t"]["wall"] / b2["t"]["wall"], b1["t"]["rss"] / 1e6, max(pr["rss"] for pr in b2["per_rank"]) / 1e6))
print("bytes of peak RSS per transition (1 rank): %.1f" % (b1["t"]["rss"] / T))
q = tv("build_quarter.time")
qi = first_json("build_quarter.info.json")
Tq = qi["n_transitions"]
print()
print("peak RSS against model size (1 rank):")
print("  %-9s %12s %10s %12s" % ("model", "transitions", "rss_MB", "B/transition"))
print("  %-9s %12d %10.0f %12.2f" % ("quarter", Tq, q["rss"] / 1e6, q["rss"] / Tq))
print("  %-9s %12d %10.0f %12.2f" % ("full", T, b1["t"]["rss"] / 1e6, b1["t"]["rss"] / T))
print("  transitions x%.2f, peak RSS x%.2f (a build holding the model would grow about as the transitions)"
      % (T / Tq, b1["t"]["rss"] / q["rss"]))
EOF
