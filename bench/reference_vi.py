#!/usr/bin/python3
"""reference_vi.py - numpy/scipy value-iteration reference for the solve benchmark.

Reads a sluice model file with h5py (independently of sluice), builds the
(n_pairs x n_states) CSR matrix P, and runs plain synchronous (Jacobi) value
iteration
    q = r + g P v;   (T v)(s) = max over the pairs of s of q   (np.maximum.reduceat)
from v = 0, with the same stopping rule as sluice: stop when
    span(d) <= tol (1-g)/g,   d = T v - v
(Puterman 1994, "Markov Decision Processes", Wiley, Section 6.6.3: the
greedy policy is then tol-optimal). The value reported (with --output) is
T v shifted by the midpoint of the MacQueen bounds (same section), so its
certified error is g/(1-g) span(d)/2.

Prints one JSON line: sizes, sweeps, seconds per sweep (mean, median,
min), total sweep seconds, load seconds, final span, bounds and peak RSS
(ru_maxrss of this process, which includes loading the model).

usage: reference_vi.py MODEL.h5 [--tolerance EPS] [--max-sweeps N]
                       [--output VALUES.npy]
Run it with a python3 that has numpy, scipy and h5py (Debian: /usr/bin/python3).
"""

import argparse
import json
import resource
import sys
import time

import h5py
import numpy as np
import scipy
import scipy.sparse as sp

try:    # y += A x into a preallocated y: avoids a fresh 8*n_pairs-byte array
    from scipy.sparse._sparsetools import csr_matvec   # (and its page faults)
except ImportError:                                     # per sweep
    csr_matvec = None


def attr(f, name):
    x = f.attrs[name]
    if isinstance(x, np.ndarray) and x.shape == (1,):
        x = x[0]
    return x.item() if isinstance(x, np.generic) else x


def load(path):
    """Return (n, gamma, first_pair, P csr, r)."""
    with h5py.File(path, "r") as f:
        n = int(attr(f, "n_states"))
        gamma = float(attr(f, "discount"))
        first_pair = f["state/first_pair"][...].astype(np.int64)
        r = f["pair/reward"][...].astype(np.float64)
        indptr = f["pair/first_transition"][...]
        target = f["transition/target"][...]
        prob = f["transition/probability"][...].astype(np.float64)
    n_pairs = len(r)
    # 32-bit indices where they fit: what a careful numpy user would do
    small = n < 2 ** 31 - 1 and len(target) < 2 ** 31 - 1
    idx_t = np.int32 if small else np.int64
    P = sp.csr_matrix((prob, target.astype(idx_t, copy=False),
                       indptr.astype(idx_t, copy=False)),
                      shape=(n_pairs, n))
    del target, indptr
    return n, gamma, first_pair, P, r


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("model")
    ap.add_argument("--tolerance", type=float, default=1e-6)
    ap.add_argument("--max-sweeps", type=int, default=100000)
    ap.add_argument("--output", help="write the value vector (.npy)")
    a = ap.parse_args()

    t0 = time.perf_counter()
    n, gamma, first_pair, P, r = load(a.model)
    t_load = time.perf_counter() - t0
    starts = first_pair[:-1]
    if np.any(np.diff(first_pair) < 1):
        sys.stderr.write("reference_vi: a state has no action\n")
        return 65
    threshold = a.tolerance * (1.0 - gamma) / gamma

    v = np.zeros(n)
    gv = np.empty(n)
    tv = np.empty(n)
    q = np.empty(P.shape[0])
    times = []
    converged = False
    span = dmin = dmax = float("nan")
    for _ in range(a.max_sweeps):
        ts = time.perf_counter()
        if csr_matvec is not None:
            np.multiply(v, gamma, out=gv)
            np.copyto(q, r)
            csr_matvec(P.shape[0], n, P.indptr, P.indices, P.data, gv, q)
        else:
            q = P @ v
            q *= gamma
            q += r
        np.maximum.reduceat(q, starts, out=tv)
        d = tv - v
        dmin = float(d.min())
        dmax = float(d.max())
        v, tv = tv, v
        times.append(time.perf_counter() - ts)
        span = dmax - dmin
        if span <= threshold:
            converged = True
            break
    k = gamma / (1.0 - gamma)
    value = v + k * 0.5 * (dmin + dmax)
    if a.output:
        np.save(a.output, value)
    t = np.array(times)
    out = {
        "tool": "numpy-scipy reference value iteration",
        "model": a.model,
        "n_states": n,
        "n_pairs": int(P.shape[0]),
        "n_transitions": int(P.nnz),
        "discount": gamma,
        "tolerance": a.tolerance,
        "converged": converged,
        "sweeps": len(times),
        "seconds_per_sweep_mean": float(t.mean()) if len(t) else None,
        "seconds_per_sweep_median": float(np.median(t)) if len(t) else None,
        "seconds_per_sweep_min": float(t.min()) if len(t) else None,
        "seconds_total": float(t.sum()),
        "seconds_load": t_load,
        "residual_span": span,
        "value_error_bound": k * 0.5 * span,
        "policy_loss_bound": k * span,
        "peak_rss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        * 1024,
        "matvec": "scipy csr_matvec in place" if csr_matvec is not None
        else "scipy P @ v",
        "numpy": np.__version__,
        "scipy": scipy.__version__,
    }
    print(json.dumps(out, sort_keys=True))
    return 0 if converged else 75


if __name__ == "__main__":
    sys.exit(main())
