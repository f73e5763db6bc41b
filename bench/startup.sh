#!/bin/bash
# startup.sh - the start-up of a solve (reading, validating and hashing the
# model): 1-iteration solves of the big reservoir, the model read through
# H5Dread (SLUICE_DIRECT_CHUNKS=0) and by the direct chunk reader
# (src/store/h5_chunks.c), interleaved in this one run; optionally a third
# binary (OLD_SLUICE, e.g. a build of an earlier commit) beside them.
#
# usage: bench/startup.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#   REPS=3         runs of each variant, interleaved
#   OLD_SLUICE=... another sluice binary, run as a third variant
#
# Prints each run (wall, user, sys, CPU = user + sys, peak RSS, minor page
# faults, load average before it), then the medians and the ratio of the CPU
# medians. On a shared machine read CPU time, peak RSS and page faults; wall
# time depends on the load.
. "$(dirname "$0")/lib.sh"
bench_init "$@"
REPS=${REPS:-3}
cd "$WORK" || exit 73
bench_machine | tee startup-machine.txt
bench_big
variants="h5dread direct"
[ -n "${OLD_SLUICE:-}" ] && variants="old $variants"
: >startup-runs.txt
for r in $(seq "$REPS"); do
    for v in $variants; do
        b=$SLUICE
        d=1
        case $v in
            old) b=$OLD_SLUICE ;;
            h5dread) d=0 ;;
        esac
        l=$(cut -d' ' -f1 /proc/loadavg)
        # exit 75: not converged after the one iteration, as asked
        SLUICE_DIRECT_CHUNKS=$d bench_timed "startup.$v.$r" "$b" solve "$BIG" -o startup.h5 --max-iterations 1 -q
        rc=$?
        [ "$rc" = 0 ] || [ "$rc" = 75 ] || bench_fail "$v run $r: exit $rc ($(tail -1 "startup.$v.$r.err"))"
        echo "$v $r $(bench_tv "startup.$v.$r.time" wall) $(bench_tv "startup.$v.$r.time" user)" \
             "$(bench_tv "startup.$v.$r.time" sys) $(bench_tv "startup.$v.$r.time" cpu)" \
             "$(bench_tv "startup.$v.$r.time" rss) $(bench_tv "startup.$v.$r.time" minflt) $l" >>startup-runs.txt
    done
done
rm -f startup.h5
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)" | tee -a startup-machine.txt
"$PYTHON" - startup-runs.txt <<'PYEOF'
import statistics, sys
runs = {}
order = []
for line in open(sys.argv[1]):
    v, r, wall, user, sys_, cpu, rss, minflt, load = line.split()
    if v not in runs:
        runs[v] = []
        order.append(v)
    runs[v].append((float(wall), float(user), float(sys_), float(cpu), float(rss), float(minflt), float(load)))
print("%-8s %3s %8s %8s %8s %8s %9s %9s %6s" %
      ("variant", "run", "wall s", "user s", "sys s", "CPU s", "RSS MB", "minflt", "load"))
for v in order:
    for i, x in enumerate(runs[v], 1):
        print("%-8s %3d %8.2f %8.2f %8.2f %8.2f %9.0f %9.0f %6.2f" % ((v, i) + x))
med = {v: [statistics.median(x[k] for x in runs[v]) for k in range(6)] for v in order}
print()
for v in order:
    print("%-8s medians: wall %.2f s, user %.2f s, sys %.2f s, CPU %.2f s, peak RSS %.0f MB, minor faults %.0f" %
          (v, med[v][0], med[v][1], med[v][2], med[v][3], med[v][4], med[v][5]))
for v in order:
    if v != "direct":
        print("CPU direct / %s: %.3f; peak RSS direct - %s: %+.0f MB" %
              (v, med["direct"][3] / med[v][3], v, med["direct"][4] - med[v][4]))
PYEOF
