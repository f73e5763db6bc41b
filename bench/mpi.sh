#!/bin/bash
# mpi.sh - 1 rank vs 2 ranks on the ~10^6-state reservoir: seconds per sweep
# (jacobi and gs), bytes exchanged per sweep (sluice info --partition 2),
# peak RSS per rank, sweeps to a certified tolerance.
#
# usage: bench/mpi.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#   METHODS="jacobi gs"   TOL=1e-6   RANKS="1 2"
#
# Both rank counts are launched with $MPIRUN -np N, so the 1-rank run pays
# the same launcher cost as the 2-rank run. Per-sweep wall time comes from
# sluice's report history; cpu/sweep is (CPU of the full run - CPU of a
# 1-sweep run with the same rank count) / (sweeps - 1), summed over ranks.
# Gauss-Seidel on this staged model needs the 1-rank sweep count on 2 ranks
# since the stage-interleaved layout (every rank holds a share of every
# month; one stage at a time on all ranks, halo exchange after each stage).
# Before it, each rank swept a block of months and the count nearly doubled.
. "$(dirname "$0")/lib.sh"
bench_init "$@"
METHODS=${METHODS:-jacobi gs}
TOL=${TOL:-1e-6}
RANKS=${RANKS:-1 2}
cd "$WORK" || exit 73
bench_machine | tee mpi-machine.txt
bench_big

for np in $RANKS; do
    "$SLUICE" info "$BIG" --partition "$np" --json >"mpi.partition.$np.json" ||
        bench_fail "sluice info --partition $np failed"
    bench_timed_ranks "mpi.base.$np" "$np" "$SLUICE" solve "$BIG" -o "mpi.base.$np.h5" --method jacobi \
        --max-iterations 1 --report "mpi.base.$np.json" --progress-every 1000
    rc=$?
    [ $rc = 0 ] || [ $rc = 75 ] || { tail "mpi.base.$np.err" >&2; bench_fail "baseline on $np ranks failed ($rc)"; }
    for m in $METHODS; do
        echo "sluice --method $m on $np rank(s) to $TOL ..."
        bench_timed_ranks "mpi.$np.$m" "$np" "$SLUICE" solve "$BIG" -o "mpi.$np.$m.h5" --method "$m" \
            --tolerance "$TOL" --report "mpi.$np.$m.json" --progress-every 60 ||
            { tail "mpi.$np.$m.err" >&2; bench_fail "$m on $np ranks did not finish"; }
    done
done

# shellcheck disable=SC2086  # one argument per method
bench_python "$TOL" "$RANKS" $METHODS <<'EOF'
import json, sys
import numpy as np
import h5py

tol, ranks, methods = float(sys.argv[1]), [int(r) for r in sys.argv[2].split()], sys.argv[3:]

def json_docs(path):
    """sluice info --partition --json prints the model document, then the partition document"""
    text, docs, i = open(path).read(), [], 0
    dec = json.JSONDecoder()
    while True:
        while i < len(text) and text[i].isspace():
            i += 1
        if i >= len(text):
            return docs
        d, i = dec.raw_decode(text, i)
        docs.append(d)

def per_sweep(rep):
    h = rep["history"]
    if len(h) < 2 or h[-1]["sweeps"] <= h[0]["sweeps"]:
        return float("nan")
    return (h[-1]["seconds"] - h[0]["seconds"]) / (h[-1]["sweeps"] - h[0]["sweeps"])

part = {np_: json_docs("mpi.partition.%d.json" % np_)[-1] for np_ in ranks}
print()
print("predicted by sluice info --partition N (balanced by transitions):")
hdr = "%-6s %-5s %10s %14s %10s %14s %14s" % ("ranks", "rank", "states", "transitions", "halo", "bytes_in/sweep",
                                              "mem_est_MB")
print(hdr)
print("-" * len(hdr))
for np_ in ranks:
    for p in part[np_]["parts"]:
        print("%-6d %-5d %10d %14d %10d %14.0f %14.1f" % (np_, p["rank"], p["states"], p["transitions"], p["halo"],
                                                         p["bytes_in_per_sweep"], p["memory_bytes_estimate"] / 1e6))
    print("%-6d total: %.0f bytes exchanged per sweep (%.3f MB), transition imbalance %.4f" % (
        np_, part[np_]["bytes_exchanged_per_sweep"], part[np_]["bytes_exchanged_per_sweep"] / 1e6,
        part[np_]["transition_imbalance"]))

rows = {}
for np_ in ranks:
    base = [tv("mpi.base.%d.time.%d" % (np_, k)) for k in range(np_)]
    for m in methods:
        rep = json.load(open("mpi.%d.%s.json" % (np_, m)))
        pr = [tv("mpi.%d.%s.time.%d" % (np_, m, k)) for k in range(np_)]
        launch = tv("mpi.%d.%s.time" % (np_, m))
        cpu = sum(x["cpu"] for x in pr)
        cpu_sweep = (cpu - sum(x["cpu"] for x in base)) / max(rep["sweeps"] - 1, 1)
        with h5py.File("mpi.%d.%s.h5" % (np_, m), "r") as f:
            v = f["value"][...]
            pol = f["policy"][...]
        rows[(np_, m)] = dict(rep=rep, pr=pr, launch=launch, cpu=cpu, cpu_sweep=cpu_sweep,
                              wall_sweep=per_sweep(rep), v=v, pol=pol)

print()
hdr = "%-6s %-7s %-5s %7s %10s %10s %9s %9s %15s %9s" % (
    "ranks", "method", "conv", "sweeps", "wall/sweep", "cpu/sweep", "e2e_wall", "e2e_cpu", "rss_MB/rank", "bound")
print(hdr)
print("-" * len(hdr))
for (np_, m), x in rows.items():
    rep = x["rep"]
    print("%-6d %-7s %-5s %7d %10.4f %10.4f %9.1f %9.1f %15s %9.2e" % (
        np_, m, "yes" if rep["converged"] else "NO", rep["sweeps"], x["wall_sweep"], x["cpu_sweep"],
        x["launch"]["wall"], x["cpu"], "/".join("%.0f" % (p["rss"] / 1e6) for p in x["pr"]),
        rep["value_error_bound"]))
print()
print("wall/sweep: from the report history; cpu/sweep: CPU seconds per sweep summed over ranks (a rank")
print("waiting in MPI may spin, so this can exceed the work); e2e: the whole mpirun launch.")
if 1 in ranks:
    print()
    print("1 rank vs N ranks:")
    for np_ in ranks:
        if np_ == 1:
            continue
        for m in methods:
            a, b = rows[(1, m)], rows[(np_, m)]
            print("  %-7s speedup per sweep (wall) %.2f, end to end (wall) %.2f; sweeps %d -> %d (x%.2f); "
                  "max|v1 - v%d| %.2e; policies differ in %d states; largest rank RSS %.0f -> %.0f MB"
                  % (m, a["wall_sweep"] / b["wall_sweep"], a["launch"]["wall"] / b["launch"]["wall"],
                     a["rep"]["sweeps"], b["rep"]["sweeps"], b["rep"]["sweeps"] / a["rep"]["sweeps"], np_,
                     float(np.max(np.abs(a["v"] - b["v"]))), int(np.sum(a["pol"] != b["pol"])),
                     max(p["rss"] for p in a["pr"]) / 1e6, max(p["rss"] for p in b["pr"]) / 1e6))
    for np_ in ranks:
        for m in methods[:1]:
            x = rows[(np_, m)]
            est = [p["memory_bytes_estimate"] for p in part[np_]["parts"]]
            print("  %d rank(s): measured peak RSS / info estimate per rank: %s" % (
                np_, ", ".join("%.2f" % (p["rss"] / e) for p, e in zip(x["pr"], est))))
EOF
