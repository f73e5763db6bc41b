#!/usr/bin/python3
"""test_table.py - `sluice table` against numbers recomputed independently
from the files with h5py and numpy (never from sluice's own output).

usage: test_table.py SLUICE_BINARY WORKDIR

The reservoir example (a small variant) is built and solved; then every
--show form is checked cell by cell against a recomputation from /value,
/policy, /factor/NAME/value, /action/value and /quantity/NAME/mean:

* marginal:FACTOR (the water value along storage, and along inflow):
  - against numpy.gradient(v, x, edge_order=1) (numpy, Debian package
    python3-numpy; documented as second-order central differences in the
    interior and first-order one-sided differences at the boundaries), within
    1e-9 of the largest |marginal| (numpy's non-uniform-spacing formula
    differs from ours only by the rounding of the grid spacing);
  - against the formula of the issue recomputed here,
    (v[i+1] - v[i-1]) / (x[i+1] - x[i-1]) and one-sided at the ends (the
    three-point central difference, e.g. Burden & Faires, "Numerical
    Analysis", 9th ed., 2011, sect. 4.1 -- section recalled from memory),
    within a relative 1e-12 (the CSV prints 15 significant digits);
* action: /action/value at /policy; value: /value; a quantity: its
  /quantity/NAME/mean at the pair (s, policy(s));
* switch: the rows where /policy changes down each column;
* the same CSV from 1, 2 and 3 MPI ranks (byte for byte: each cell is
  computed by one rank from the same numbers).

Run under /usr/bin/python3 (Debian numpy and h5py).
"""

import csv
import io
import os
import subprocess
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

PARAMS = ["--param", "storage_levels=21", "--param", "inflow_classes=4", "--param", "release_levels=7"]


def run_table(binary, args, ranks):
    env = dict(os.environ, OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1")
    cmd = [binary, "table"] + args + ["-o", "-"]
    if ranks > 1:
        cmd = [mc.mpiexec(), "-np", str(ranks), "--oversubscribe"] + cmd
    cp = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, timeout=300)
    if cp.returncode != 0:
        raise mc.SluiceError("%s: exit %d: %s" % (" ".join(cmd), cp.returncode, cp.stderr.strip()))
    return cp.stdout


def parse_csv(text):
    rows = list(csv.reader(io.StringIO(text)))
    return rows[0], [r[0] for r in rows[1:]], [r[1:] for r in rows[1:]]


def main():
    binary, work = mc.parse_args(sys.argv, "test_table.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("table")
    model, sol = os.path.join(work, "res.h5"), os.path.join(work, "sol.h5")
    mc.run_sluice(binary, ["build", "-q", os.path.join(os.path.dirname(__file__), "..", "..", "examples",
                                                       "reservoir.c")] + PARAMS + ["-o", model])
    mc.run_sluice(binary, ["solve", "-q", model, "-o", sol, "--tolerance", "1e-6"])

    with h5py.File(model, "r") as f:
        L = f["factor/storage/value"].shape[0]
        J = f["factor/inflow/value"].shape[0]
        xs = f["factor/storage/value"][...]
        xj = f["factor/inflow/value"][...]
        months = [x.decode() for x in f["factor/month/label"][...]]
        aval = f["action/value"][...]
        fp = f["state/first_pair"][...]
        pact = f["pair/action"][...]
        spill = f["quantity/spill/mean"][...]
        hdr_units = (f["factor/storage/value"].attrs["unit"].decode(), f.attrs["reward_unit"].decode())
    with h5py.File(sol, "r") as f:
        v = f["value"][...]
        pol = f["policy"][...].astype(np.int64)
    M = 12
    # state s = i + L*(j + J*m): arrays indexed [m, j, i]
    V = v.reshape(M, J, L)
    P = pol.reshape(M, J, L)
    # the pair chosen in each state
    chosen = np.empty(len(v), np.int64)
    for s in range(len(v)):
        ks = np.nonzero(pact[fp[s]:fp[s + 1]] == pol[s])[0]
        chosen[s] = fp[s] + ks[0]
    SP = spill[chosen].reshape(M, J, L)

    def own_marginal(y, x):
        """(y[i+1]-y[i-1])/(x[i+1]-x[i-1]) along the last axis, one-sided at the ends."""
        out = np.empty_like(y)
        out[..., 1:-1] = (y[..., 2:] - y[..., :-2]) / (x[2:] - x[:-2])
        out[..., 0] = (y[..., 1] - y[..., 0]) / (x[1] - x[0])
        out[..., -1] = (y[..., -1] - y[..., -2]) / (x[-1] - x[-2])
        return out

    j_fix = 1
    cases = {
        "action": (["--rows", "storage", "--cols", "month", "--fix", "inflow@%d" % j_fix],
                   aval[P[:, j_fix, :]].T, None),
        "value": (["--rows", "storage", "--cols", "month", "--fix", "inflow@%d" % j_fix, "--show", "value"],
                  V[:, j_fix, :].T, None),
        "marginal:storage": (["--rows", "storage", "--cols", "month", "--fix", "inflow@%d" % j_fix,
                              "--show", "marginal:storage"],
                             own_marginal(V[:, j_fix, :], xs).T,
                             np.gradient(V[:, j_fix, :], xs, axis=1, edge_order=1).T),
        "marginal:inflow": (["--rows", "inflow", "--cols", "month", "--fix", "storage@10",
                             "--show", "marginal:inflow"],
                            own_marginal(V[:, :, 10], xj).T,
                            np.gradient(V[:, :, 10], xj, axis=1, edge_order=1).T),
        "spill": (["--rows", "storage", "--cols", "month", "--fix", "inflow=%.6g" % xj[3], "--show", "spill"],
                  SP[:, 3, :].T, None),
    }
    base = [sol, "--model", model]
    outputs = {}
    for name, (args, want, ref) in cases.items():
        text = run_table(binary, base + args, 1)
        outputs[name] = (args, text)
        corner, rlab, cells = parse_csv(text)
        got = np.array([[float(c) for c in row] for row in cells])
        chk.check(got.shape == want.shape, "%s: table shape" % name, "%s vs %s" % (got.shape, want.shape))
        if got.shape != want.shape:
            continue
        if name.startswith("marginal"):
            err = np.max(np.abs(got - want) / np.maximum(np.abs(want), 1e-300))
            chk.check(err <= 1e-12, "%s: equals the central/one-sided differences recomputed from /value" % name,
                      "max relative error %.3g" % err)
            scale = np.max(np.abs(ref))
            err2 = np.max(np.abs(got - ref)) / scale
            chk.check(err2 <= 1e-9, "%s: agrees with numpy.gradient(edge_order=1)" % name,
                      "max error %.3g of the largest |marginal| %.4g" % (err2, scale))
        else:
            err = np.max(np.abs(got - want))
            tol = 1e-13 * max(1.0, np.max(np.abs(want)))
            chk.check(err <= tol, "%s: equals the recomputation from the files" % name, "max error %.3g" % err)
        if name in ("action", "value", "marginal:storage", "spill"):
            chk.check(corner[0] == "storage [%s]" % hdr_units[0] and corner[1:] == months,
                      "%s: header is the row factor with its unit, then the month labels" % name, str(corner))
            chk.check(rlab == ["%.6g" % x for x in xs], "%s: row labels are the storage values" % name)

    # switch: rows where the policy changes down each column
    text = run_table(binary, base + ["--rows", "storage", "--cols", "month", "--fix", "inflow@%d" % j_fix,
                                     "--show", "switch"], 1)
    outputs["switch"] = (None, text)
    rows = list(csv.reader(io.StringIO(text)))[1:]
    want = []
    for m in range(M):
        for i in range(1, L):
            a0, a1 = P[m, j_fix, i - 1], P[m, j_fix, i]
            if a0 != a1:
                want.append([months[m], "%.6g" % xs[i - 1], "%.6g" % xs[i], "%.6g" % aval[a0], "%.6g" % aval[a1]])
    chk.check(rows == want, "switch: the rows where /policy changes, per month",
              "%d switches listed, %d expected" % (len(rows), len(want)))

    # 2 and 3 ranks give the same CSV, byte for byte
    if mc.mpiexec() is None:
        print("skip: no mpiexec for the 2- and 3-rank comparison")
    else:
        for ranks in (2, 3):
            for name in ("action", "marginal:storage", "spill"):
                args = outputs[name][0]
                text = run_table(binary, base + args, ranks)
                chk.check(text == outputs[name][1], "%s: %d ranks give the 1-rank CSV" % (name, ranks))
            text = run_table(binary, base + ["--rows", "storage", "--cols", "month", "--fix", "inflow@%d" % j_fix,
                                             "--show", "switch"], ranks)
            chk.check(text == outputs["switch"][1], "switch: %d ranks give the 1-rank CSV" % ranks)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
