#!/usr/bin/python3
"""test_totals.py - `sluice evaluate --totals/--compare`: the expected
discounted total of each outcome quantity under a policy, against scipy.

usage: test_totals.py SLUICE_BINARY WORKDIR

For a small Tamsel reservoir (docs/reservoir.md), the optimal policy and a
second, simple policy (always release 0: action 0, always available), the
totals x_q solve (I - gamma P_pi) x_q = m_q with m_q(s) = /quantity/q/mean of
the pair (s, pi(s)) (policy evaluation with the quantity as the reward;
Puterman, "Markov Decision Processes", Wiley 1994, sect. 6.1 -- recalled
from memory). The reference is scipy.sparse.linalg.spsolve (Debian package
python3-scipy) on the matrices rebuilt from the files with h5py. Checks:
every state's total of every quantity, for both policies and their
difference, within the certificate sluice prints plus 1e-9 relative; the
same numbers from 1, 2 and 3 MPI ranks; units in the CSV header.

Run under /usr/bin/python3 (Debian numpy, scipy and h5py).
"""

import csv
import os
import shutil
import subprocess
import sys

import h5py
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
RESERVOIR = os.path.join(HERE, "..", "..", "examples", "reservoir.c")


def evaluate(binary, work, model, pol, other, tag, ranks=1):
    env = dict(os.environ, OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1")
    out = os.path.join(work, "totals-%s.csv" % tag)
    cmd = [binary, "evaluate", model, "--policy", pol, "-o", os.path.join(work, "v-%s.h5" % tag),
           "--totals", out, "--compare", other, "--quiet"]
    if ranks > 1:
        cmd = [mc.mpiexec(), "-np", str(ranks), "--oversubscribe"] + cmd
    cp = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, timeout=600)
    if cp.returncode != 0:
        raise mc.SluiceError("%s: exit %d: %s" % (" ".join(cmd), cp.returncode, cp.stderr.strip()))
    with open(out) as f:
        rows = list(csv.reader(f))
    bounds = {}
    for line in cp.stdout.splitlines():
        parts = line.split()
        if len(parts) >= 7 and parts[0] != "quantity":
            try:
                bounds[parts[0]] = float(parts[5])
            except ValueError:
                pass
    return rows[0], np.array([[float(x) for x in r] for r in rows[1:]]), bounds, cp.stdout


def reference(model, policy):
    with h5py.File(model, "r") as f:
        n = int(f.attrs["n_states"])
        g = float(f.attrs["discount"])
        fp, act = f["state/first_pair"][...], f["pair/action"][...]
        ft, tg, pb = f["pair/first_transition"][...], f["transition/target"][...].astype(np.int64), \
            f["transition/probability"][...]
        qn = [x.decode() for x in f["labels/quantity_name"][...]]
        units = {q: f["quantity/%s/mean" % q].attrs["unit"].decode() for q in qn}
        qm = {q: f["quantity/%s/mean" % q][...] for q in qn}
    chosen = np.array([fp[s] + int(np.nonzero(act[fp[s]:fp[s + 1]] == policy[s])[0][0]) for s in range(n)])
    rows, cols, vals = [], [], []
    for s in range(n):
        k = chosen[s]
        rows += [s] * int(ft[k + 1] - ft[k])
        cols += tg[ft[k]:ft[k + 1]].tolist()
        vals += pb[ft[k]:ft[k + 1]].tolist()
    A = (sp.identity(n, format="csc") - g * sp.csr_matrix((vals, (rows, cols)), shape=(n, n))).tocsc()
    return qn, units, {q: sla.spsolve(A, qm[q][chosen]) for q in qn}


def main():
    binary, work = mc.parse_args(sys.argv, "test_totals.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("totals")
    model, sol, zero = (os.path.join(work, x) for x in ("res.h5", "sol.h5", "zero.h5"))
    mc.run_sluice(binary, ["build", "-q", RESERVOIR, "--param", "storage_levels=21", "--param", "inflow_classes=3",
                           "--param", "release_levels=5", "-o", model])
    mc.run_sluice(binary, ["solve", "-q", model, "-o", sol, "--tolerance", "1e-6"])
    shutil.copy(sol, zero)
    with h5py.File(zero, "r+") as f:
        f["policy"][...] = 0
    with h5py.File(sol, "r") as f:
        pa = f["policy"][...].astype(np.int64)
    pb = np.zeros_like(pa)
    qn, units, ra = reference(model, pa)
    _, _, rb = reference(model, pb)
    head, got, bounds, text = evaluate(binary, work, model, sol, zero, "np1")
    want_head = ["state"]
    for q in qn:
        want_head += ["%s [%s]" % (q, units[q]), "%s compared [%s]" % (q, units[q]),
                      "%s difference [%s]" % (q, units[q])]
    chk.check(head == want_head, "CSV header: state, then each quantity with its unit (this, compared, difference)",
              str(head[:4]))
    chk.check("licensed engineering judgement" in text, "printed summary carries the caution")
    chk.check(set(bounds) == set(qn), "summary lists every quantity with its certificate", str(sorted(bounds)))
    for i, q in enumerate(qn):
        a, b = got[:, 1 + 3 * i], got[:, 2 + 3 * i]
        tol = bounds.get(q, 0.0) + 1e-9 * max(1.0, float(np.max(np.abs(ra[q]))))
        ea, eb = float(np.max(np.abs(a - ra[q]))), float(np.max(np.abs(b - rb[q])))
        chk.check(ea <= tol, "%s: totals under the optimal policy = scipy spsolve" % q, "max error %.3g, allowed %.3g"
                  % (ea, tol))
        chk.check(eb <= tol, "%s: totals under 'release 0' = scipy spsolve" % q, "max error %.3g" % eb)
        ed = float(np.max(np.abs(got[:, 3 + 3 * i] - (ra[q] - rb[q]))))
        chk.check(ed <= 2 * tol, "%s: difference column" % q, "max error %.3g" % ed)
    # the two policies differ, so the comparison is not vacuous
    chk.check(float(np.max(np.abs(ra["release"] - rb["release"]))) > 1.0, "the compared policies differ in release")
    if mc.mpiexec() is None:
        chk.note("skip: no mpiexec for the 2- and 3-rank comparison")
    else:
        for ranks in (2, 3):
            _, g2, b2, _ = evaluate(binary, work, model, sol, zero, "np%d" % ranks, ranks)
            worst = 0.0
            for i, q in enumerate(qn):
                tol = bounds[q] + b2[q] + 1e-9 * max(1.0, float(np.max(np.abs(ra[q]))))
                worst = max(worst, float(np.max(np.abs(g2[:, 1 + 3 * i] - got[:, 1 + 3 * i]))) / tol)
            chk.check(g2.shape == got.shape and worst <= 1.0, "%d ranks agree with 1 rank within the certificates"
                      % ranks, "worst %.3g of the allowance" % worst)
    rule_csv(binary, work, model, sol, chk)
    return chk.finish()


def rule_csv(binary, work, model, sol, chk):
    """--compare with a CSV of actions by state labels (a rule operated today):
    the same totals as scipy's for that policy, and as the same policy given
    as a solution file."""
    with h5py.File(model, "r") as f:
        fp, act = f["state/first_pair"][...], f["pair/action"][...]
        names = [x.decode() for x in f["labels/factor_name"][...]]
        size = f["labels/factor_size"][...]
        sval = f["factor/storage/value"][...]
        months = [x.decode() for x in f["factor/month/label"][...]]
        anames = [x.decode() for x in f["labels/action_name"][...]]
    n = len(fp) - 1
    # the rule: the largest release offered when the storage index is odd, else the smallest
    rule = np.array([act[fp[s + 1] - 1] if (s % size[0]) % 2 else act[fp[s]] for s in range(n)])
    path = os.path.join(work, "rule.csv")
    with open(path, "w") as f:
        f.write("month,storage,inflow,action\n")   # any factor order
        for s in range(n):
            i, j, k = s % size[0], (s // size[0]) % size[1], s // (size[0] * size[1])
            f.write("%s,%.6g,@%d,%s\n" % (months[k], sval[i], j, anames[rule[s]]))
    chk.check(names == ["storage", "inflow", "month"], "factor order of the reservoir", str(names))
    ruleh5 = os.path.join(work, "rule.h5")
    shutil.copy(sol, ruleh5)
    with h5py.File(ruleh5, "r+") as f:
        f["policy"][...] = rule
    qn, _, rr = reference(model, rule)
    _, got, bounds, text = evaluate(binary, work, model, sol, path, "rule")
    _, goth, _, _ = evaluate(binary, work, model, sol, ruleh5, "ruleh5")
    chk.check("the policy in %s" % path in text, "the summary names the rule's CSV")
    for i, q in enumerate(qn):
        tol = bounds.get(q, 0.0) + 1e-9 * max(1.0, float(np.max(np.abs(rr[q]))))
        e = float(np.max(np.abs(got[:, 2 + 3 * i] - rr[q])))
        chk.check(e <= tol, "%s: totals of the CSV rule = scipy spsolve" % q, "max error %.3g, allowed %.3g" % (e, tol))
        chk.check(np.array_equal(got[:, 2 + 3 * i], goth[:, 2 + 3 * i]),
                  "%s: the CSV rule gives the same totals as the same policy in a solution file" % q)


if __name__ == "__main__":
    sys.exit(main())
