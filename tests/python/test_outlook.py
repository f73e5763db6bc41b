#!/usr/bin/python3
"""test_outlook.py - `sluice outlook` against independent recomputations.

usage: test_outlook.py SLUICE_BINARY WORKDIR

A small Tamsel reservoir (docs/reservoir.md) is built and solved. From the
files read with h5py (never from sluice's output) this script rebuilds the
policy's transition matrix P_pi with scipy.sparse and checks:

1. Exact propagation: mu_{t+1} = mu_t P_pi recomputed with scipy.sparse;
   per stage the factor means and lower quantiles (smallest grid value whose
   cumulative probability reaches p), the quantities' expected values and
   probabilities of being positive, and the discounted reward so far agree
   with the JSON within 1e-9 relative (sums in another order).
2. Distribution sanity: mu_t sums to 1 within 1e-12 at every stage;
   p5 <= p25 <= p50 <= p75 <= p95; a deterministic variant
   (inflow_classes=1) gives point masses (every quantile equals the mean,
   every p_positive is 0 or 1).
3. Conservation, the continuity equation of reservoir routing (storage change
   = inflow - outflow; Chow, Maidment & Mays, "Applied Hydrology",
   McGraw-Hill, 1988, ch. 8, "reservoir routing" -- chapter recalled from
   memory): E[S_{t+1}] - E[S_t] = E[inflow - evaporation - release - spill
   + rounding]_t within 1e-9 of the capacity, and without the grid-rounding
   term within half a storage step dS/2 per stage (the model's documented
   rounding, docs/reservoir.md).
4. Tail of a discounted sum: |discounted_reward(N) - v(start)| <=
   gamma^N max|r| / (1 - gamma) + the solution's value_error_bound (a
   geometric series bound; Puterman, "Markov Decision Processes", Wiley 1994,
   sect. 6.1 -- section recalled from memory).
5. Monte Carlo: K independent trajectories sampled with numpy (an
   independent sampler, not sluice's); for every stage the sample mean of
   the storage and the sample frequencies of spill > 0 and shortfall > 0 must
   lie within Hoeffding's bound of the exact values: for m checks and
   variables in [a, b], P(|mean - mu| >= eps) <= 2 exp(-2 K eps^2/(b-a)^2)
   (Hoeffding, "Probability inequalities for sums of bounded random
   variables", JASA 58, 1963, Theorem 2); eps is set so that the
   probability of a false failure of the whole test is at most
   ALPHA = 1e-6 (union bound over the m checks). No normal approximation.
6. 1, 2 and 3 MPI ranks give the same numbers (within 1e-12 relative).
7. The -o FILE.csv table: one row per stage with the JSON's numbers (15
   significant digits), unique column names, each carrying the unit the
   model file stores (read with h5py) - the reservoir's factor and quantity
   both called inflow differ by their unit.

Run under /usr/bin/python3 (Debian numpy, scipy and h5py).
"""

import csv
import json
import math
import os
import subprocess
import sys

import h5py
import numpy as np
import scipy.sparse as sp

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
RESERVOIR = os.path.join(HERE, "..", "..", "examples", "reservoir.c")
ALPHA = 1e-6
K = 20000
STAGES = 36


def outlook(binary, model, sol, start, stages, ranks=1):
    env = dict(os.environ, OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1")
    cmd = [binary, "outlook", model, sol, "--start", start, "--stages", str(stages), "--json"]
    if ranks > 1:
        cmd = [mc.mpiexec(), "-np", str(ranks), "--oversubscribe"] + cmd
    cp = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, timeout=600)
    if cp.returncode != 0:
        raise mc.SluiceError("%s: exit %d: %s" % (" ".join(cmd), cp.returncode, cp.stderr.strip()))
    return json.loads(cp.stdout)


class Files:
    """Everything the checks need, read with h5py."""

    def __init__(self, model, sol):
        with h5py.File(model, "r") as f:
            self.n = int(f.attrs["n_states"])
            self.gamma = float(f.attrs["discount"])
            fp = f["state/first_pair"][...]
            act = f["pair/action"][...]
            ft = f["pair/first_transition"][...]
            tg = f["transition/target"][...].astype(np.int64)
            pb = f["transition/probability"][...]
            rw = f["pair/reward"][...]
            self.names = [x.decode() for x in f["labels/factor_name"][...]]
            self.sizes = [int(x) for x in f["labels/factor_size"][...]]
            self.values = {nm: f["factor/%s/value" % nm][...] for nm in self.names if "factor/%s/value" % nm in f}
            qn = [x.decode() for x in f["labels/quantity_name"][...]]
            qmean = {q: f["quantity/%s/mean" % q][...] for q in qn}
            qpos = {q: f["quantity/%s/p_positive" % q][...] for q in qn}
            self.rmax = float(np.max(np.abs(rw)))
        with h5py.File(sol, "r") as f:
            self.v = f["value"][...]
            pol = f["policy"][...].astype(np.int64)
            self.value_error = float(f.attrs["value_error_bound"])
        chosen = np.empty(self.n, np.int64)
        for s in range(self.n):
            ks = np.nonzero(act[fp[s]:fp[s + 1]] == pol[s])[0]
            chosen[s] = fp[s] + ks[0]
        rows, cols, vals = [], [], []
        for s in range(self.n):
            k = chosen[s]
            rows.extend([s] * (ft[k + 1] - ft[k]))
            cols.extend(tg[ft[k]:ft[k + 1]].tolist())
            vals.extend(pb[ft[k]:ft[k + 1]].tolist())
        self.P = sp.csr_matrix((vals, (rows, cols)), shape=(self.n, self.n))
        self.r = rw[chosen]
        self.qmean = {q: qmean[q][chosen] for q in qn}
        self.qpos = {q: qpos[q][chosen] for q in qn}
        self.qnames = qn

    def index(self, name):
        f = self.names.index(name)
        stride = int(np.prod(self.sizes[:f])) if f else 1
        return (np.arange(self.n) // stride) % self.sizes[f]


def lower_quantile(x, w, p):
    order = np.argsort(x, kind="stable")
    cum = np.cumsum(w[order])
    k = int(np.searchsorted(cum, p * cum[-1] - 1e-12, side="left"))
    return x[order[min(k, len(x) - 1)]]


def check_exact(chk, fl, doc, start_state, label):
    """start_state: a state number (a point mass) or a start distribution (a vector)."""
    mu = np.zeros(fl.n)
    if np.ndim(start_state) == 0:
        mu[start_state] = 1.0
    else:
        mu[:] = start_state
    acc, disc = 0.0, 1.0
    worst = 0.0
    for t, st in enumerate(doc["stages"]):
        ok_t = st["stage"] == t
        mass = mu.sum()
        chk.check(abs(st["mass"] - 1.0) <= 1e-12, "%s stage %d: mu_t sums to 1" % (label, t), repr(st["mass"]))
        for nm, x in fl.values.items():
            w = np.bincount(fl.index(nm), weights=mu, minlength=len(x))
            want = [float(w @ x / mass)] + [lower_quantile(x, w, p) for p in (0.05, 0.25, 0.5, 0.75, 0.95)]
            got = [st["factors"][nm][k] for k in ("mean", "p5", "p25", "p50", "p75", "p95")]
            scale = max(1.0, float(np.max(np.abs(x))))
            err = max(abs(a - b) for a, b in zip(got, want)) / scale
            worst = max(worst, err)
            ok_t &= err <= 1e-9
            ok_t &= all(got[i] <= got[i + 1] for i in range(1, 5))
        for q in fl.qnames:
            want = (float(mu @ fl.qmean[q]), float(mu @ fl.qpos[q]))
            got = (st["quantities"][q]["mean"], st["quantities"][q]["p_positive"])
            scale = max(1.0, float(np.max(np.abs(fl.qmean[q]))))
            err = max(abs(got[0] - want[0]) / scale, abs(got[1] - want[1]))
            worst = max(worst, err)
            ok_t &= err <= 1e-9
        err = abs(st["discounted_reward"] - acc) / max(1.0, abs(acc))
        worst = max(worst, err)
        ok_t &= err <= 1e-9
        chk.check(ok_t, "%s stage %d: factors, quantiles (monotone), quantities, discounted reward = scipy "
                  "propagation" % (label, t))
        acc += disc * float(mu @ fl.r)
        disc *= fl.gamma
        mu = fl.P.T @ mu
    chk.note("%s: largest scaled difference from the scipy propagation %.3g" % (label, worst))


def build_and_solve(binary, work, levels, classes, releases):
    """A Tamsel reservoir of the given size in WORK/res.h5, solved to 1e-6 into WORK/sol.h5."""
    params = ["--param", "storage_levels=%d" % levels, "--param", "inflow_classes=%d" % classes,
              "--param", "release_levels=%d" % releases]
    model, sol = os.path.join(work, "res.h5"), os.path.join(work, "sol.h5")
    mc.run_sluice(binary, ["build", "-q", RESERVOIR] + params + ["-o", model])
    mc.run_sluice(binary, ["solve", "-q", model, "-o", sol, "--tolerance", "1e-6"])
    return model, sol


def worst_difference(base, other):
    """Largest difference between two outlook documents' figures, relative to max(1, |figure|)."""
    worst = 0.0
    for a, b in zip(base["stages"], other["stages"]):
        for nm in a["factors"]:
            for k in a["factors"][nm]:
                worst = max(worst, abs(a["factors"][nm][k] - b["factors"][nm][k]) / max(1, abs(a["factors"][nm][k])))
        for q in a["quantities"]:
            for k in ("mean", "p_positive"):
                worst = max(worst, abs(a["quantities"][q][k] - b["quantities"][q][k])
                            / max(1, abs(a["quantities"][q][k])))
        worst = max(worst, abs(a["discounted_reward"] - b["discounted_reward"]) / max(1, abs(a["discounted_reward"])))
    return worst


def check_csv(chk, binary, work, model, sol, start_spec, doc):
    """outlook -o FILE.csv: the JSON's numbers under unique, unit-carrying names."""
    path = os.path.join(work, "outlook.csv")
    cp = subprocess.run([binary, "outlook", model, sol, "--start", start_spec, "--stages", str(STAGES), "-o", path, "-q"],
                        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, timeout=600)
    chk.check(cp.returncode == 0, "outlook -o FILE.csv exits 0", cp.stderr.strip())
    if cp.returncode != 0:
        return
    with h5py.File(model, "r") as f:
        def unit(path):
            u = f[path].attrs.get("unit", b"") if path in f else b""
            return u.decode() if isinstance(u, bytes) else str(u)
        fnames = [x.decode() for x in f["labels/factor_name"][...]]
        qnames = [x.decode() for x in f["labels/quantity_name"][...]]
        funit = {n: unit("factor/%s/value" % n) for n in fnames}
        qunit = {q: unit("quantity/%s/mean" % q) for q in qnames}
        ru = f.attrs.get("reward_unit", b"")
        runit = ru.decode() if isinstance(ru, bytes) else str(ru)
    with_unit = lambda name, u: "%s [%s]" % (name, u) if u else name
    # expected columns and where each number is in the JSON document
    cols = [("stage", lambda st: st["stage"])]
    for n in fnames:
        if n not in doc["stages"][0]["factors"]:
            continue            # a factor without numeric values has no statistics
        for stat in ("mean", "p5", "p25", "p50", "p75", "p95"):
            cols.append((with_unit("%s_%s" % (n, stat), funit[n]), lambda st, n=n, stat=stat: st["factors"][n][stat]))
    for q in qnames:
        cols.append((with_unit("%s_mean" % q, qunit[q]), lambda st, q=q: st["quantities"][q]["mean"]))
        cols.append(("%s_p_positive" % q, lambda st, q=q: st["quantities"][q]["p_positive"]))
    cols.append((with_unit("discounted_reward", runit), lambda st: st["discounted_reward"]))
    cols.append(("mass", lambda st: st["mass"]))
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    head = rows[0]
    chk.check(len(set(head)) == len(head), "outlook CSV: column names are unique",
              ", ".join(sorted(h for h in head if head.count(h) > 1)))
    chk.check(head == [c[0] for c in cols], "outlook CSV: columns NAME_STAT [unit] with the model file's units",
              "got %s" % head)
    chk.check(any("[" in h for h in head) and runit != "", "outlook CSV: the reservoir has units to show")
    worst = 0.0
    ok = len(rows) == STAGES + 2 and head == [c[0] for c in cols]
    if ok:
        for st, row in zip(doc["stages"], rows[1:]):
            for (name, get), cell in zip(cols, row):
                want = float(get(st))
                worst = max(worst, abs(float(cell) - want) / max(1.0, abs(want)))
    chk.check(ok and worst <= 1e-13, "outlook CSV: one row per stage with the JSON's numbers",
              "%d rows, worst relative difference %.3g" % (len(rows) - 1, worst))


def main():
    binary, work = mc.parse_args(sys.argv, "test_outlook.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("outlook")
    model, sol = build_and_solve(binary, work, 31, 5, 7)
    fl = Files(model, sol)
    L, J = fl.sizes[0], fl.sizes[1]
    start_spec = "storage@%d,inflow@%d,month=Mar" % (L // 3, J - 1)
    start = L // 3 + L * ((J - 1) + J * 2)
    doc = outlook(binary, model, sol, start_spec, STAGES)
    chk.check(len(doc["stages"]) == STAGES + 1, "stages 0..N reported")
    check_exact(chk, fl, doc, start, "reservoir")

    # conservation (continuity equation), per stage
    dS = float(fl.values["storage"][1] - fl.values["storage"][0])
    cap = float(fl.values["storage"][-1])
    worst, worst_no_round = 0.0, 0.0
    for t in range(STAGES):
        a, b = doc["stages"][t], doc["stages"][t + 1]
        q = {k: a["quantities"][k]["mean"] for k in a["quantities"]}
        change = b["factors"]["storage"]["mean"] - a["factors"]["storage"]["mean"]
        balance = q["inflow"] - q["evaporation"] - q["release"] - q["spill"]
        worst = max(worst, abs(change - (balance + q["rounding"])))
        worst_no_round = max(worst_no_round, abs(change - balance))
    chk.check(worst <= 1e-9 * cap, "continuity: E[dS] = E[inflow - evaporation - release - spill + rounding]",
              "worst %.3g hm3" % worst)
    chk.check(worst_no_round <= dS / 2, "continuity without the rounding term within dS/2 per stage",
              "worst %.3g hm3, dS/2 = %.3g hm3" % (worst_no_round, dS / 2))
    chk.note("continuity: worst %.3g hm3 with the rounding quantity, %.3g hm3 without (dS/2 = %.3g)"
             % (worst, worst_no_round, dS / 2))

    # tail bound of the discounted sum against the solution's value
    long_doc = outlook(binary, model, sol, str(start), 400)
    N = 400
    tail = fl.gamma ** N * fl.rmax / (1 - fl.gamma) + fl.value_error
    err = abs(long_doc["stages"][-1]["discounted_reward"] - fl.v[start])
    chk.check(err <= tail, "discounted reward over 400 stages is within the tail bound of v(start)",
              "difference %.4g, bound %.4g kCU" % (err, tail))
    chk.check(long_doc["start_value"] == fl.v[start], "start_value is the solution's value of the start")

    # Monte Carlo with an independent sampler and Hoeffding bounds
    rng = np.random.default_rng(20261202)
    P = fl.P
    keys = np.empty(P.nnz)
    for s in range(fl.n):  # row s's cumulative probabilities, offset by s: one increasing array
        a, b = P.indptr[s], P.indptr[s + 1]
        keys[a:b] = s + np.minimum(np.cumsum(P.data[a:b]), 1.0)
        keys[b - 1] = s + 1.0
    x_storage = fl.values["storage"]
    i_storage = fl.index("storage")
    states = np.full(K, start, np.int64)
    m_checks = 3 * (STAGES + 1)
    eps_unit = math.sqrt(math.log(2 * m_checks / ALPHA) / (2 * K))
    mc_ok, worst_ratio = True, 0.0
    for t in range(STAGES + 1):
        st = doc["stages"][t]
        checks = [(x_storage[i_storage[states]].mean(), st["factors"]["storage"]["mean"], cap, "storage mean"),
                  ((fl.qpos["spill"][states] > 0.5).mean(), st["quantities"]["spill"]["p_positive"], 1.0,
                   "P(spill > 0)"),
                  ((fl.qpos["shortfall"][states] > 0.5).mean(), st["quantities"]["shortfall"]["p_positive"], 1.0,
                   "P(shortfall > 0)")]
        for got, want, width, what in checks:
            eps = width * eps_unit
            worst_ratio = max(worst_ratio, abs(got - want) / eps)
            if abs(got - want) > eps:
                mc_ok = False
                chk.check(False, "Monte Carlo stage %d: %s within Hoeffding's bound" % (t, what),
                          "sampled %.6g, exact %.6g, bound %.3g" % (got, want, eps))
        u = rng.random(K)
        idx = np.searchsorted(keys, states + u, side="right")
        idx = np.minimum(idx, P.indptr[states + 1] - 1)
        states = P.indices[idx]
    chk.check(mc_ok, "Monte Carlo: %d per-stage checks within Hoeffding's bound (false-failure probability <= %g)"
              % (m_checks, ALPHA))
    chk.note("Monte Carlo: largest |sampled - exact| is %.3f of the Hoeffding bound (K = %d)" % (worst_ratio, K))

    # deterministic model: point masses
    dmodel, dsol = os.path.join(work, "det.h5"), os.path.join(work, "det_sol.h5")
    mc.run_sluice(binary, ["build", "-q", RESERVOIR, "--param", "storage_levels=31", "--param", "inflow_classes=1",
                           "--param", "release_levels=7", "-o", dmodel])
    mc.run_sluice(binary, ["solve", "-q", dmodel, "-o", dsol, "--tolerance", "1e-6"])
    ddoc = outlook(binary, dmodel, dsol, "storage@5,inflow@0,month=Jan", 30)
    point = True
    for st in ddoc["stages"]:
        for nm, f in st["factors"].items():
            point &= all(f[k] == f["mean"] or abs(f[k] - f["mean"]) <= 1e-12 * max(1, abs(f["mean"]))
                         for k in ("p5", "p25", "p50", "p75", "p95"))
        for q, v in st["quantities"].items():
            point &= abs(v["p_positive"]) <= 1e-12 or abs(v["p_positive"] - 1) <= 1e-12
    chk.check(point, "deterministic variant: point masses at every stage")
    check_exact(chk, Files(dmodel, dsol), ddoc, 5, "deterministic")

    check_csv(chk, binary, work, model, sol, start_spec, doc)

    # ranks
    if mc.mpiexec() is None:
        chk.note("skip: no mpiexec for the 2- and 3-rank comparison")
    else:
        base = doc
        for ranks in (2, 3):
            other = outlook(binary, model, sol, start_spec, STAGES, ranks)
            worst = worst_difference(base, other)
            chk.check(len(other["stages"]) == len(base["stages"]) and worst <= 1e-12,
                      "%d ranks give the 1-rank outlook" % ranks, "worst relative difference %.3g" % worst)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
