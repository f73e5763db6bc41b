#!/usr/bin/python3
"""test_estimate.py - models estimated from logged experience (`sluice estimate`).

Experience is sampled in numpy from a known random model (invented test data)
with a fixed seed: every (state, action) is tried n times and each try logs
one step (state, action, reward, next_state), the reward being that of the
transition taken. Checked against outside sources:

1. Convergence. The estimated model's optimal value approaches the true one
   as n grows, within a tolerance that holds with probability >= 1 - delta:
   * the L1 deviation of an empirical distribution over m outcomes from n
     draws: P(|p_hat - p|_1 >= eps) <= (2^m - 2) exp(-n eps^2 / 2)
     (Weissman, Ordentlich, Seroussi, Verdu, Weinberger 2003, "Inequalities
     for the L1 deviation of the empirical distribution", HP Labs
     HPL-2003-97, Theorem 2.1; recalled from memory), with a union bound over
     the pairs, delta = 0.01;
   * the simulation lemma (Kearns & Singh 2002, "Near-optimal reinforcement
     learning in polynomial time", Machine Learning 49, Lemma 4; recalled
     from memory), in this form: rewards are fixed per transition, so
     r_hat(s,a) = sum_j p_hat_j r_j and, for any policy pi,
       V_hat^pi - V^pi = (I - g P_hat_pi)^-1 [sum_j (p_hat_j - p_j)(r_j + g V^pi(j))],
     where r_j + g V^pi(j) lies in an interval of width 2 R / (1 - g)
     (|r| <= R); a zero-sum weight vector against values in an interval of
     width w is at most |p_hat - p|_1 w / 2, hence
       |V_hat^pi - V^pi| <= eps R / (1 - g)^2   for every pi,
     and the same for the optimal values (max over pi on both sides).
   The value of the estimated model is sluice's (estimate + solve, certified
   to 1e-9); the true one is numpy/scipy policy iteration (Howard 1960).
   The bound is also checked with the eps measured from the file (h5py),
   which makes it deterministic.
2. The stored model equals the maximum-likelihood estimate computed from the
   same CSV in numpy (counts / visits, mean rewards), and /pair/visits the
   number of logged steps of each pair.
3. Thin pairs: `sluice info --json --thin-below K` lists exactly the pairs
   seen fewer than K times, for two values of K; the report data counts them.
4. Smoothing: probabilities equal (c_j + a) / (n + a m) over the state's
   observed successors, rewards r(s,a) unchanged (numpy).
5. Bonus / penalty: solve with r +- c/sqrt(n); numpy policy iteration on the
   adjusted rewards gives the same values; the bonus raises and the penalty
   lowers every value, by between c/sqrt(n_max)/(1-g) and c/sqrt(n_min)/(1-g)
   (monotonicity of the Bellman operator, Puterman 1994, Section 6.2);
   verify certifies the adjusted solution and refuses it once the recorded
   adjustment is removed.
6. The fingerprint covers /pair/visits (a tampered count is refused).

Usage: test_estimate.py SLUICE WORKDIR   (run with /usr/bin/python3)
"""

import json
import os
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402


def sample_log(mdp, counts, seed, path):
    """counts[k] steps of pair k; write the experience CSV in a shuffled order."""
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(mdp.n_pairs):
        t0, t1 = mdp.first_trans[k], mdp.first_trans[k + 1]
        idx = rng.choice(np.arange(t0, t1), size=int(counts[k]), p=mdp.prob[t0:t1])
        s, a = int(mdp.state_of_pair[k]), int(mdp.action[k])
        rows += [(s, a, float(mdp.trans_reward[t]), int(mdp.target[t])) for t in idx]
    order = rng.permutation(len(rows))
    with open(path, "w") as f:
        f.write("state,action,reward,next_state\n")
        f.write("".join("%d,%d,%r,%d\n" % rows[i] for i in order))
    return rows


def ml_estimate(rows, n):
    """Maximum-likelihood pieces from the rows: {(s,a): (count, {j: c}, sum r)}."""
    est = {}
    for s, a, r, j in rows:
        c, succ, tot = est.get((s, a), (0, {}, 0.0))
        succ[j] = succ.get(j, 0) + 1
        est[(s, a)] = (c + 1, succ, tot + r)
    return est


def model_pairs(path):
    """{(s,a): (visits, {j: p}, r)} from a model file, read with h5py."""
    out = {}
    with h5py.File(path, "r") as f:
        fp = f["state/first_pair"][...]
        act = f["pair/action"][...]
        ft = f["pair/first_transition"][...]
        tg = f["transition/target"][...]
        pr = f["transition/probability"][...]
        rw = f["pair/reward"][...]
        vis = f["pair/visits"][...]
    for s in range(len(fp) - 1):
        for k in range(fp[s], fp[s + 1]):
            out[(s, int(act[k]))] = (int(vis[k]), {int(tg[t]): float(pr[t]) for t in range(ft[k], ft[k + 1])},
                                     float(rw[k]))
    return out


def solve_values(binary, model, sol, extra=()):
    mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-9", "-q"] + list(extra))
    return mc.read_solution(sol)["value"]


def pi_values(mdp):
    v, _, _ = mc.policy_iteration(mdp)
    return v


def check_convergence(chk, binary, work):
    gamma, R, delta = 0.5, 1.0, 0.01
    true = mc.random_mdp(401, 6, gamma, actions=(2, 2), successors=(1, 3))
    vstar = pi_values(true)
    msupp = np.diff(true.first_trans)
    errs, bounds = [], []
    for n in (100, 1000, 10000):
        csv = os.path.join(work, "conv%d.csv" % n)
        model = os.path.join(work, "conv%d.h5" % n)
        rows = sample_log(true, np.full(true.n_pairs, n), 500 + n, csv)
        mc.run_sluice(binary, ["estimate", csv, "--discount", gamma, "-o", model, "--states", true.n, "-q"])
        vhat = solve_values(binary, model, os.path.join(work, "conv%d_sol.h5" % n))
        err = float(np.max(np.abs(vhat - vstar)))
        # a priori tolerance (Weissman et al. 2003 + union bound + simulation lemma)
        eps = np.sqrt(2.0 / n * np.log((2.0 ** msupp - 2).clip(min=1) * true.n_pairs / delta))
        bound = float(np.max(eps)) * R / (1 - gamma) ** 2
        chk.check(err <= bound, "n=%d per pair: |V_hat* - V*| within the concentration + simulation-lemma "
                  "tolerance" % n, "error %.3g, tolerance %.3g" % (err, bound))
        # the same lemma with the deviation measured from the file
        got = model_pairs(model)
        eps_hat = 0.0
        for k in range(true.n_pairs):
            s, a = int(true.state_of_pair[k]), int(true.action[k])
            ph = got[(s, a)][1]
            dev = sum(abs(ph.get(int(true.target[t]), 0.0) - true.prob[t])
                      for t in range(true.first_trans[k], true.first_trans[k + 1]))
            dev += sum(p for j, p in ph.items() if j not in true.target[true.first_trans[k]:true.first_trans[k + 1]])
            eps_hat = max(eps_hat, dev)
        chk.check(err <= eps_hat * R / (1 - gamma) ** 2 + 1e-8,
                  "n=%d: error within the simulation lemma at the measured L1 deviation" % n,
                  "error %.3g, measured eps %.3g" % (err, eps_hat))
        # the file is the maximum-likelihood estimate of these rows
        ml = ml_estimate(rows, true.n)
        worst = 0.0
        vis_ok = True
        for key, (c, succ, tot) in ml.items():
            v, ph, r = got[key]
            vis_ok &= v == c
            worst = max(worst, abs(r - tot / c), max(abs(ph.get(j, 0.0) - cj / c) for j, cj in succ.items()))
        chk.check(vis_ok and set(ml) == set(got), "n=%d: /pair/visits holds the logged steps of every pair" % n)
        chk.check(worst <= 1e-12, "n=%d: probabilities and rewards are the numpy maximum-likelihood estimate" % n,
                  "max diff %.3g" % worst)
        errs.append(err)
        bounds.append(bound)
        chk.note("n=%6d per pair: |V_hat* - V*| = %.4g (tolerance %.4g)" % (n, err, bound))
    chk.check(errs[-1] < errs[0], "the error shrinks as the sample grows", "%s" % errs)


def check_thin_and_adjust(chk, binary, work):
    gamma = 0.8
    true = mc.random_mdp(402, 8, gamma, actions=(1, 3), successors=(1, 3))
    counts = np.random.default_rng(403).integers(1, 25, size=true.n_pairs)
    csv = os.path.join(work, "thin.csv")
    model = os.path.join(work, "thin.h5")
    sample_log(true, counts, 404, csv)
    mc.run_sluice(binary, ["estimate", csv, "--discount", gamma, "-o", model, "-q"])
    truth = {(int(true.state_of_pair[k]), int(true.action[k])): int(counts[k]) for k in range(true.n_pairs)}
    # thresholds equal to counts that occur, so "fewer than" is told from "at most"
    Ks = (int(np.sort(counts)[len(counts) // 4]), int(np.sort(counts)[len(counts) // 2]))
    for K in Ks:
        cp = mc.run_sluice(binary, ["info", model, "--json", "--thin-below", K])
        vis = json.loads(cp.stdout)["visits"]
        listed = {(e["state"], e["action"]): e["visits"] for e in vis["thin"]}
        want = {key: c for key, c in truth.items() if c < K}
        chk.check(listed == want and vis["thin_pairs"] == len(want),
                  "info --thin-below %d lists exactly the pairs seen fewer than %d times" % (K, K),
                  "listed %s, want %s" % (sorted(listed), sorted(want)))
    K = Ks[1]
    cp = mc.run_sluice(binary, ["info", model, "--thin-below", K])
    chk.check("thin pairs    %d seen fewer than %d times" % (sum(c < K for c in truth.values()), K) in cp.stdout,
              "info (text) states the number of thin pairs")

    # bonus and penalty against numpy on the estimated model
    est = mc.read_model(model)
    with h5py.File(model, "r") as f:
        n = f["pair/visits"][...].astype(np.float64)
    base = solve_values(binary, model, os.path.join(work, "thin_sol.h5"))
    c = 0.7
    for name, sign in (("bonus", 1.0), ("penalty", -1.0)):
        sol = os.path.join(work, "thin_%s.h5" % name)
        got = solve_values(binary, model, sol, ["--visit-" + name, c])
        adj = mc.Mdp(est.n, gamma, est.first_pair, est.action, est.first_trans, est.target, est.prob,
                     r=est.r + sign * c / np.sqrt(n))
        ref = pi_values(adj)
        d = float(np.max(np.abs(got - ref)))
        chk.check(d <= 1e-7, "--visit-%s %g: values equal numpy policy iteration with r %s c/sqrt(n)"
                  % (name, c, "+" if sign > 0 else "-"), "max diff %.3g" % d)
        lo, hi = c / np.sqrt(n.max()) / (1 - gamma), c / np.sqrt(n.min()) / (1 - gamma)
        shift = sign * (got - base)
        chk.check(np.all(shift >= lo - 1e-7) and np.all(shift <= hi + 1e-7),
                  "--visit-%s moves every value %s by between c/sqrt(n_max)/(1-g) and c/sqrt(n_min)/(1-g)"
                  % (name, "up" if sign > 0 else "down"),
                  "shift %.4g..%.4g, expected within [%.4g, %.4g]" % (shift.min(), shift.max(), lo, hi))
        chk.check(abs(mc.read_solution(sol).get("visit_adjust", 0) - sign * c) == 0,
                  "the %s solution records visit_adjust = %+g" % (name, sign * c))
        mc.run_sluice(binary, ["verify", model, sol], expect=(0,))
        chk.check(True, "verify certifies the %s solution with the adjusted rewards" % name)
    sol = os.path.join(work, "thin_bonus.h5")
    with h5py.File(sol, "r+") as f:
        del f.attrs["visit_adjust"]
    cp = mc.run_sluice(binary, ["verify", model, sol], expect=(mc.EXIT_DATAERR,))
    chk.check("not certified" in cp.stderr.lower() or "NOT certified" in cp.stdout,
              "verify refuses the bonus solution once its recorded adjustment is removed")

    # report data counts the thin pairs
    data = os.path.join(work, "thin_report.json")
    cp = mc.run_sluice(binary, ["report", model, os.path.join(work, "thin_penalty.h5"), "--data-only",
                                "--data", data, "--thin-below", K])
    if os.path.exists(data):
        vis = json.load(open(data))["model"]["visits"]
        chk.check(vis["thin_pairs"] == sum(cc < K for cc in truth.values()) and vis["thin_below"] == K,
                  "report data: thin_pairs is the number of pairs seen fewer than K = %d times" % K, "%s" % vis)
    else:
        chk.fail("report data written", cp.stderr[-500:])

    # the fingerprint covers /pair/visits
    bad = os.path.join(work, "thin_tampered.h5")
    with open(model, "rb") as a, open(bad, "wb") as b:
        b.write(a.read())
    with h5py.File(bad, "r+") as f:
        v = f["pair/visits"][...]
        v[0] += 1
        f["pair/visits"][...] = v
    cp = mc.run_sluice(binary, ["solve", bad, "-o", os.path.join(work, "x.h5"), "-q"], expect=(mc.EXIT_DATAERR,))
    chk.check("fingerprint" in cp.stderr, "a changed visit count is caught by the fingerprint", cp.stderr[-300:])


def check_smoothing(chk, binary, work):
    gamma, alpha = 0.9, 0.5
    true = mc.random_mdp(405, 5, gamma, actions=(1, 3), successors=(1, 3))
    counts = np.random.default_rng(406).integers(1, 6, size=true.n_pairs)
    csv = os.path.join(work, "smooth.csv")
    model = os.path.join(work, "smooth.h5")
    rows = sample_log(true, counts, 407, csv)
    mc.run_sluice(binary, ["estimate", csv, "--discount", gamma, "-o", model, "--smoothing", alpha, "-q"])
    ml = ml_estimate(rows, true.n)
    got = model_pairs(model)
    worst = 0.0
    support_ok = True
    for (s, a), (c, succ, tot) in ml.items():
        sup = sorted({j for (s2, _), (_, sc, _) in ml.items() if s2 == s for j in sc})
        v, ph, r = got[(s, a)]
        support_ok &= sorted(ph) == sup and v == c
        for j in sup:
            worst = max(worst, abs(ph.get(j, 0.0) - (succ.get(j, 0) + alpha) / (c + alpha * len(sup))))
        worst = max(worst, abs(r - tot / c))
    chk.check(support_ok, "smoothing spreads over exactly the state's observed successors; visits unchanged")
    chk.check(worst <= 1e-12, "smoothing: p = (c_j + a)/(n + a m) and the mean reward is kept (numpy)",
              "max diff %.3g" % worst)


def main():
    binary, work = mc.parse_args(sys.argv, "test_estimate.py SLUICE WORKDIR")
    chk = mc.Checker("test_estimate")
    check_convergence(chk, binary, work)
    check_thin_and_adjust(chk, binary, work)
    check_smoothing(chk, binary, work)
    chk.finish()


if __name__ == "__main__":
    main()
