#!/usr/bin/env bash
# Install the library into a scratch prefix and build users' C programs
# against it: one with pkg-config (reads a model file built by the CLI), and
# examples/library/pond.c with CMake's find_package(sluice) (builds a model in
# memory on 1 and 2 ranks, solves it); the pond's optimum is checked against
# numpy, which reads the saved model with h5py and finds the optimal policy
# by enumerating every policy and solving (I - g P_pi) v = r_pi exactly.
set -u
SLUICE=$1 WORK=$2 SRC=$3
BUILD=$(dirname "$SLUICE")
rm -rf "$WORK" && mkdir -p "$WORK"
pass=0 fail=0
ok() { echo "ok - $1"; pass=$((pass+1)); }
bad() { echo "not ok - $1"; fail=$((fail+1)); }
if cmake --install "$BUILD" --prefix "$WORK/prefix" > "$WORK/install.log" 2>&1; then ok "cmake --install"; else bad "cmake --install"; cat "$WORK/install.log"; fi
cat > "$WORK/user.c" <<'C'
#include <sluice/sluice.h>
int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    sl_ctx *ctx = NULL;
    int rc = 70;
    if (sl_ctx_new(MPI_COMM_WORLD, 0, &ctx) == SL_OK) {
        sl_info_opts o = {.path = argv[1], .json = 1, .out = stdout};
        rc = (int)sl_info(ctx, &o);
        if (rc != 0) fprintf(stderr, "%s\n", sl_ctx_message(ctx));
        sl_ctx_free(&ctx);
    }
    MPI_Finalize();
    return rc;
}
C
export PKG_CONFIG_PATH="$WORK/prefix/lib/pkgconfig"
flags=$(pkg-config --cflags --libs sluice 2>"$WORK/pc.err")
if [ -n "$flags" ]; then ok "pkg-config finds sluice"; else bad "pkg-config finds sluice"; cat "$WORK/pc.err"; fi
if cc -std=c11 -Wall -Wextra -Werror "$WORK/user.c" -o "$WORK/user" $flags -Wl,-rpath,"$WORK/prefix/lib" 2>"$WORK/cc.err"; then
  ok "user program compiles and links"; else bad "user program compiles and links"; cat "$WORK/cc.err"; fi
"$SLUICE" build "$SRC/examples/two_state.c" -o "$WORK/two.h5" -q
if "$WORK/user" "$WORK/two.h5" > "$WORK/out.json" && grep -q '"n_states": 2' "$WORK/out.json"; then
  ok "user program reads a model through the library"; else bad "user program reads a model through the library"; fi
# find_package(sluice CONFIG) and the imported target sluice::sluice
if cmake -S "$SRC/examples/library" -B "$WORK/pond-build" -DCMAKE_PREFIX_PATH="$WORK/prefix" \
     -DCMAKE_C_FLAGS="-Wall -Wextra -Werror" > "$WORK/pond-cmake.log" 2>&1 &&
   cmake --build "$WORK/pond-build" > "$WORK/pond-build.log" 2>&1; then
  ok "examples/library builds with find_package(sluice CONFIG)"
else
  bad "examples/library builds with find_package(sluice CONFIG)"; cat "$WORK/pond-cmake.log" "$WORK/pond-build.log"
fi
POND=$WORK/pond-build/pond
export LD_LIBRARY_PATH="$WORK/prefix/lib${LD_LIBRARY_PATH:+:$LD_LIBRARY_PATH}"
if "$POND" 7 "$WORK/pond.h5" "$WORK/pond-sol.h5" > "$WORK/pond1.txt" 2> "$WORK/pond1.err"; then
  ok "pond solves in memory on 1 rank"; else bad "pond solves in memory on 1 rank"; cat "$WORK/pond1.err"; fi
if [ -n "${SLUICE_MPIEXEC:-}" ] && "$SLUICE_MPIEXEC" -np 2 --oversubscribe "$POND" 7 > "$WORK/pond2.txt" 2> "$WORK/pond2.err"; then
  ok "pond solves in memory on 2 ranks"; else bad "pond solves in memory on 2 ranks"; cat "$WORK/pond2.err"; fi
if /usr/bin/python3 - "$WORK/pond.h5" "$WORK/pond1.txt" "$WORK/pond2.txt" <<'PY'
import itertools, sys
import h5py, numpy as np
path, out1, out2 = sys.argv[1:4]
with h5py.File(path, "r") as f:
    fp = f["/state/first_pair"][:]; act = f["/pair/action"][:]; rew = f["/pair/reward"][:]
    ft = f["/pair/first_transition"][:]; tgt = f["/transition/target"][:]; pr = f["/transition/probability"][:]
    g = float(f.attrs["discount"])
n = len(fp) - 1
choices = [range(fp[s], fp[s + 1]) for s in range(n)]
best = None
for pol in itertools.product(*choices):          # every deterministic stationary policy
    P = np.zeros((n, n)); r = np.zeros(n)
    for s, k in enumerate(pol):
        r[s] = rew[k]
        for t in range(ft[k], ft[k + 1]):
            P[s, tgt[t]] += pr[t]
    v = np.linalg.solve(np.eye(n) - g * P, r)
    best = v if best is None else np.maximum(best, v)
# an optimal stationary policy attains v* in every state at once
# (Puterman 1994, Markov Decision Processes, Thm 6.2.10), so the elementwise
# maximum over all policies is v*
for out in (out1, out2):
    rows = [l.split(",") for l in open(out) if not l.startswith("#")]
    v = np.array([float(x[2]) for x in rows])
    err = np.max(np.abs(v - best))
    print(out, "max |v - v*| =", err)
    assert len(v) == n and err <= 1e-9, err
PY
then ok "pond values match the exact optimum (numpy, every policy enumerated)"; else bad "pond values match the exact optimum"; fi
echo "$pass passed, $fail failed"
[ "$fail" -eq 0 ]
