#!/usr/bin/python3
"""test_rule.py - a rule operated today, given as a CSV of actions by state,
as the policy of `outlook`, `evaluate` and `simulate` (--policy RULE.csv),
checked against independent recomputations of the same rule.

usage: test_rule.py SLUICE_BINARY WORKDIR

A small Tamsel reservoir (docs/reservoir.md) is built and solved. The rule
(largest release offered when the storage index is odd, else the smallest)
is written as a CSV whose states use every accepted form (storage by value
as printed, inflow by @INDEX, month by label) and whose actions alternate
between name, value and @ID, in shuffled order; the same rule is also
written into a copy of the solution file with h5py. Checks:

1. outlook --policy RULE.csv from a start distribution equals the exact
   propagation mu_{t+1} = mu_t P_rule recomputed with scipy.sparse from the
   model file read by h5py (test_outlook.check_exact: factor means and lower
   quantiles, quantity means and P(>0), discounted reward, within 1e-9
   scaled); start_value is null (a rule has no values); the same run with
   the rule in a solution file gives the same numbers; 2 and 3 MPI ranks give
   the 1-rank numbers (the rule is read on rank 0 and scattered).
   `table RULE.csv` shows the rule's release in every cell.
2. evaluate --policy RULE.csv (1 and 2 ranks): /value solves (I - gamma P_rule) v = r_rule,
   the policy evaluation equation (Puterman, "Markov Decision Processes",
   Wiley 1994, sect. 6.1 -- section recalled from memory), solved here by
   scipy.sparse.linalg.spsolve, within the written certificate + 1e-9
   relative.
3. The outlook's discounted reward over 400 stages is within the geometric
   tail bound gamma^N max|r| / (1 - gamma) of mu_0 . v_rule (Puterman 1994,
   sect. 6.1, recalled from memory) plus evaluate's certificate.
4. simulate --policy RULE.csv --start-distribution -o STAGES.csv with
   Hoeffding intervals at confidence 1 - 1e-7 (Hoeffding, "Probability
   inequalities for sums of bounded random variables", J. Amer. Statist.
   Assoc. 58(301):13-30, 1963, Theorem 2): the CSV has one row per stage,
   units in the header and the numbers of the --json run with the same seed;
   every exact figure of the outlook lies inside its interval. With m cells
   the false-failure probability is at most m * 1e-7 (union bound; m is
   printed, about 250 here, so below 3e-5).

Run under /usr/bin/python3 (Debian numpy, scipy and h5py).
"""

import csv
import json
import os
import shutil
import subprocess
import sys

import h5py
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import mdp_common as mc  # noqa: E402
import test_outlook as tol  # noqa: E402

STAGES = 24
SIM_STAGES = 12
ALPHA = 1e-7


def run_json(binary, args, ranks=1):
    env = dict(os.environ, OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1")
    cmd = [binary] + args
    if ranks > 1:
        cmd = [mc.mpiexec(), "-np", str(ranks), "--oversubscribe"] + cmd
    cp = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, timeout=600)
    if cp.returncode != 0:
        raise mc.SluiceError("%s: exit %d: %s" % (" ".join(cmd), cp.returncode, cp.stderr.strip()))
    return json.loads(cp.stdout)


def write_rule(model, path, seed):
    """The rule as a CSV in mixed forms; returns the action ids by state."""
    with h5py.File(model, "r") as f:
        n = int(f.attrs["n_states"])
        fp = f["state/first_pair"][...]
        act = f["pair/action"][...]
        size = [int(x) for x in f["labels/factor_size"][...]]
        sval = f["factor/storage/value"][...]
        months = [x.decode() for x in f["factor/month/label"][...]]
        anames = [x.decode() for x in f["labels/action_name"][...]]
        avals = f["action/value"][...]
    rule = np.array([act[fp[s + 1] - 1] if (s % size[0]) % 2 else act[fp[s]] for s in range(n)])
    order = np.random.default_rng(seed).permutation(n)
    with open(path, "w") as f:
        f.write("month,storage,inflow,action\n")
        for s in order:
            i, j, k = s % size[0], (s // size[0]) % size[1], s // (size[0] * size[1])
            a = int(rule[s])
            how = s % 3
            text = anames[a] if how == 0 else ("%.6g" % avals[a] if how == 1 else "@%d" % a)
            f.write("%s,%.6g,@%d,%s\n" % (months[k], sval[i], j, text))
    return rule


def main():
    binary, work = mc.parse_args(sys.argv, "test_rule.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("rule")
    model, sol = tol.build_and_solve(binary, work, 15, 3, 5)
    rule_csv, rule_h5 = os.path.join(work, "rule.csv"), os.path.join(work, "rule.h5")
    rule = write_rule(model, rule_csv, 7)
    shutil.copy(sol, rule_h5)
    with h5py.File(rule_h5, "r+") as f:
        opt = f["policy"][...].copy()
        f["policy"][...] = rule
    chk.check(int(np.sum(opt != rule)) > len(rule) // 4, "the rule differs from the optimal policy in many states",
              "%d of %d states" % (int(np.sum(opt != rule)), len(rule)))
    fl = tol.Files(model, rule_h5)  # P, r, quantities of the rule, all from h5py
    L, J = fl.sizes[0], fl.sizes[1]

    # a start distribution over three states, by factor labels
    dist = os.path.join(work, "start.csv")
    starts = [(2, 0, "Apr", 0.25), (L // 2, J - 1, "Apr", 0.5), (L - 1, 1, "May", 0.25)]
    mu0 = np.zeros(fl.n)
    months = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]
    with open(dist, "w") as f:
        f.write("storage,inflow,month,probability\n")
        for i, j, mon, p in starts:
            f.write("@%d,@%d,%s,%g\n" % (i, j, mon, p))
            mu0[i + L * (j + J * months.index(mon))] += p

    # 1. exact outlook under the rule
    base = ["outlook", model, "--policy", rule_csv, "--start-distribution", dist, "--stages", str(STAGES), "--json"]
    doc = run_json(binary, base)
    chk.check(len(doc["stages"]) == STAGES + 1, "stages 0..N reported")
    chk.check(doc["start_value"] is None, "start_value is null for a rule (it has no values)", repr(doc["start_value"]))
    tol.check_exact(chk, fl, doc, mu0, "rule")
    doch5 = run_json(binary, ["outlook", model, rule_h5] + base[4:])
    same = all(a["factors"] == b["factors"] and a["quantities"] == b["quantities"]
               and a["discounted_reward"] == b["discounted_reward"] for a, b in zip(doc["stages"], doch5["stages"]))
    chk.check(same and len(doc["stages"]) == len(doch5["stages"]),
              "the rule from its CSV and from a solution file give identical outlooks")
    if mc.mpiexec() is None:
        chk.note("skip: no mpiexec for the 2- and 3-rank comparison")
    else:
        for ranks in (2, 3):
            other = run_json(binary, base, ranks)
            worst = tol.worst_difference(doc, other)
            chk.check(len(other["stages"]) == len(doc["stages"]) and worst <= 1e-12,
                      "%d ranks: the rule's outlook equals the 1-rank one" % ranks, "worst %.3g" % worst)

    # 1b. table RULE.csv: the rule's release per storage x month, inflow fixed
    tcsv = os.path.join(work, "rule_table.csv")
    mc.run_sluice(binary, ["table", rule_csv, "--model", model, "--rows", "storage", "--cols", "month",
                           "--fix", "inflow@1", "-o", tcsv])
    with open(tcsv) as f:
        trows = list(csv.reader(f))
    with h5py.File(model, "r") as f:
        avals = f["action/value"][...]
    M = fl.sizes[2]
    want = np.array([[avals[rule[i + L * (1 + J * k)]] for k in range(M)] for i in range(L)])
    got = np.array([[float(x) for x in r[1:]] for r in trows[1:]])
    chk.check(got.shape == want.shape and np.allclose(got, want, rtol=1e-12, atol=0),
              "table RULE.csv shows the rule's release in every storage x month cell (inflow@1)", str(got.shape))

    # 2. evaluate --policy RULE.csv against scipy spsolve
    vals = os.path.join(work, "rule_values.h5")
    mc.run_sluice(binary, ["evaluate", "-q", model, "--policy", rule_csv, "-o", vals])
    with h5py.File(vals, "r") as f:
        v = f["value"][...]
        cert = float(f.attrs["value_error_bound"])
    A = sp.identity(fl.n, format="csc") - fl.gamma * fl.P.tocsc()
    vref = spla.spsolve(A, fl.r)
    err = float(np.max(np.abs(v - vref)))
    allow = cert + 1e-9 * float(np.max(np.abs(vref)))
    chk.check(err <= allow, "evaluate --policy RULE.csv = scipy spsolve of (I - gamma P_rule) v = r_rule",
              "max error %.3g, allowed %.3g kCU" % (err, allow))
    chk.check(float(np.max(np.abs(v - tol.Files(model, sol).v))) > 1.0, "the rule's values differ from the optimum's")
    if mc.mpiexec() is not None:
        # the rule read once and scattered to the solve's partition of 2 ranks
        vals2 = os.path.join(work, "rule_values_np2.h5")
        env = dict(os.environ, OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1")
        cmd = [mc.mpiexec(), "-np", "2", "--oversubscribe", binary, "evaluate", "-q", model, "--policy", rule_csv,
               "-o", vals2]
        cp = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, timeout=600)
        ok = cp.returncode == 0
        if ok:
            with h5py.File(vals2, "r") as f:
                err2 = float(np.max(np.abs(f["value"][...] - vref)))
                cert2 = float(f.attrs["value_error_bound"])
            ok = err2 <= cert2 + 1e-9 * float(np.max(np.abs(vref)))
        chk.check(ok, "evaluate --policy RULE.csv on 2 ranks = scipy spsolve", cp.stderr.strip()[-300:])

    # 3. the long outlook's discounted reward approaches mu0 . v_rule
    N = 400
    long_doc = run_json(binary, base[:6] + ["--stages", str(N), "--json"])
    tail = fl.gamma ** N * fl.rmax / (1 - fl.gamma) + cert
    err = abs(long_doc["stages"][-1]["discounted_reward"] - float(mu0 @ vref))
    chk.check(err <= tail, "outlook under the rule over %d stages is within the tail bound of mu0 . v_rule" % N,
              "difference %.4g, bound %.4g kCU" % (err, tail))

    # 4. simulate under the rule from the distribution, per-stage CSV
    stages_csv = os.path.join(work, "stages.csv")
    sim = [binary, "simulate", model, "--policy", rule_csv, "--start-distribution", dist, "--stages", str(SIM_STAGES),
           "--episodes", "3000", "--horizon", str(SIM_STAGES + 1), "--seed", "11", "--interval", "hoeffding",
           "--confidence", repr(1 - ALPHA)]
    mc.run_sluice(binary, sim[1:] + ["-o", stages_csv])
    js = run_json(binary, sim[1:] + ["--json"])
    chk.check(js["solution_value"] is None and js["policy_is_rule"] is True and js["start"] is None,
              "simulate --json: a rule has no solution value; the start is a distribution")
    with open(stages_csv) as f:
        rows = list(csv.reader(f))
    head, body = rows[0], np.array([[float(x) for x in r] for r in rows[1:]])
    names = list(js["stages"][0]["factors"])
    qn = list(js["stages"][0]["quantities"])
    want_head = ["stage"]
    units = doc["units"]
    for nm in names:
        want_head += ["%s_%s [%s]" % (nm, k, units["factors"][nm]) for k in ("mean", "low", "high")]
    for q in qn:
        want_head += ["%s_%s [%s]" % (q, k, units["quantities"][q]) for k in ("mean", "low", "high")]
        want_head += ["%s_p_positive_%s" % (q, k) for k in ("mean", "low", "high")]
    want_head += ["discounted_reward_%s [%s]" % (k, units["reward"]) for k in ("mean", "low", "high")]
    chk.check(head == want_head, "per-stage CSV header: every figure's mean, low, high with units", str(head[:4]))
    chk.check(body.shape == (SIM_STAGES + 1, len(want_head)), "per-stage CSV: one row per stage 0..N",
              str(body.shape))
    same, cells, outside = True, 0, []
    for t, st in enumerate(js["stages"]):
        row = [t]
        for nm in names:
            row += [st["factors"][nm][k] for k in ("mean", "low", "high")]
        for q in qn:
            row += [st["quantities"][q][k] for k in ("mean", "mean_low", "mean_high",
                                                     "p_positive", "p_positive_low", "p_positive_high")]
        row += [st["discounted_reward"][k] for k in ("mean", "low", "high")]
        same &= t < body.shape[0] and np.allclose(body[t], row, rtol=1e-13, atol=1e-12)
        ex = doc["stages"][t]
        pairs = [(ex["factors"][nm]["mean"], st["factors"][nm]["low"], st["factors"][nm]["high"], nm) for nm in names]
        for q in qn:
            pairs.append((ex["quantities"][q]["mean"], st["quantities"][q]["mean_low"],
                          st["quantities"][q]["mean_high"], q))
            pairs.append((ex["quantities"][q]["p_positive"], st["quantities"][q]["p_positive_low"],
                          st["quantities"][q]["p_positive_high"], q + " P>0"))
        pairs.append((ex["discounted_reward"], st["discounted_reward"]["low"], st["discounted_reward"]["high"],
                       "discounted reward"))
        for x, lo, hi, what in pairs:
            cells += 1
            slack = 1e-9 * max(1.0, abs(x))
            if not (lo - slack <= x <= hi + slack):
                outside.append("stage %d %s: exact %.6g not in [%.6g, %.6g]" % (t, what, x, lo, hi))
    chk.check(same, "per-stage CSV holds the numbers of the --json run with the same seed")
    chk.check(not outside, "every exact outlook figure lies in simulate's Hoeffding interval (%d cells, "
              "false-failure probability <= %.1e)" % (cells, cells * ALPHA), "; ".join(outside[:3]))
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
