#!/bin/bash
# kernel.sh - a bare C Jacobi sweep over the ~10^6-state reservoir, as a
# floor for sluice's own sweep (solve.sh), with the targets held two ways:
# int64 (what the solver held before it switched to 32-bit local columns)
# and uint32 (what it holds now), side by side in one process
# (bench/kernel_layout.c), and uint32 with the probabilities value-indexed
# (a 2-byte index into the table of distinct values) when there are few.
#
# usage: bench/kernel.sh SLUICE_BINARY WORKDIR [SOURCE_DIR]
#   REPS=15   sweeps per variant;  CC=cc  CFLAGS="-O3"
. "$(dirname "$0")/lib.sh"
bench_init "$@"
REPS=${REPS:-15}
CC=${CC:-cc}
CFLAGS=${CFLAGS:--O3}
cd "$WORK" || exit 73
bench_machine | tee kernel-machine.txt
bench_big
mkdir -p kernel-arrays
"$PYTHON" - "$BIG" kernel-arrays <<'EOF' || bench_fail "exporting the arrays failed"
import sys
import h5py
import numpy as np
src, out = sys.argv[1], sys.argv[2]
with h5py.File(src, "r") as f:
    f["state/first_pair"][...].astype(np.int64).tofile(out + "/first_pair.i64")
    f["pair/first_transition"][...].astype(np.int64).tofile(out + "/first_trans.i64")
    f["transition/target"][...].astype(np.uint32).tofile(out + "/target.u32")
    f["transition/probability"][...].astype(np.float64).tofile(out + "/prob.f64")
    f["pair/reward"][...].astype(np.float64).tofile(out + "/reward.f64")
    g = f.attrs["discount"]
    open(out + "/gamma.txt", "w").write("%.17g\n" % float(np.asarray(g).reshape(-1)[0]))
EOF
# shellcheck disable=SC2086
"$CC" -std=c11 $CFLAGS -o kernel_layout "$BENCH_DIR/kernel_layout.c" -lm || bench_fail "compiling kernel_layout.c failed"
bench_timed kernel ./kernel_layout kernel-arrays "$REPS" || { cat kernel.err >&2; bench_fail "kernel_layout failed"; }

"$PYTHON" - "$CC $CFLAGS" <<'EOF'
import json, sys
d = json.loads(open("kernel.out").read())
print()
print("Jacobi sweep (backup + max + residual range + greedy choice) over %d states, %d pairs, %d transitions;"
      % (d["states"], d["pairs"], d["transitions"]))
print("%d sweeps per variant, interleaved; compiled with %s" % (d["reps"], sys.argv[1]))
hdr = "%-8s %10s %10s %10s %10s %10s %10s %10s" % ("targets", "GB/sweep", "wall_min", "wall_med", "cpu_min",
                                                  "cpu_med", "GB/s wall", "GB/s cpu")
print(hdr)
print("-" * len(hdr))
for v in d["variants"]:
    print("%-8s %10.3f %10.4f %10.4f %10.4f %10.4f %10.1f %10.1f" % (
        v["targets"], v["bytes_per_sweep"] / 1e9, v["wall_min"], v["wall_median"], v["cpu_min"], v["cpu_median"],
        v["bytes_per_sweep"] / 1e9 / v["wall_min"], v["bytes_per_sweep"] / 1e9 / v["cpu_min"]))
print("(GB/sweep: 16, 12 or 6 B/transition + 16 B/pair + 28 B/state; GB/s from the minimum times)")
a, b = d["variants"][:2]
print()
print("ratio i64 / u32: wall min %.2f, wall median %.2f, cpu min %.2f, cpu median %.2f" % (
    a["wall_min"] / b["wall_min"], a["wall_median"] / b["wall_median"], a["cpu_min"] / b["cpu_min"],
    a["cpu_median"] / b["cpu_median"]))
if len(d["variants"]) > 2:
    c = d["variants"][2]
    print("ratio u32 / u32v (value-indexed probabilities, %d distinct values): wall min %.2f, wall median %.2f, "
          "cpu min %.2f, cpu median %.2f" % (d["distinct_probabilities"], b["wall_min"] / c["wall_min"],
                                             b["wall_median"] / c["wall_median"], b["cpu_min"] / c["cpu_min"],
                                             b["cpu_median"] / c["cpu_median"]))
else:
    print("value-indexed variant skipped: more than 65,536 distinct probabilities")
print("memory for the targets: i64 %.0f MB, u32 %.0f MB" % (8e-6 * d["transitions"], 4e-6 * d["transitions"]))
EOF
