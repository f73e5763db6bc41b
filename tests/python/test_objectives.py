#!/usr/bin/python3
"""test_objectives.py - the finite, total and average objectives of sluice
checked against sources outside sluice.

References (each check names its own):
  * backward induction in numpy (objectives_ref.backward_induction;
    Puterman 1994, "Markov Decision Processes", Wiley, Section 4.5, recalled
    from memory) for the finite horizon;
  * bold play in a gambler's ruin: Dubins & Savage 1965, "How to Gamble If
    You Must", Chapter 5, and Billingsley 1995, "Probability and Measure",
    3rd ed., Section 7 (bold play is optimal for p <= 1/2; chapter and
    section numbers recalled from memory). The success probability is
    computed here in exact rational arithmetic from its functional
    equation, and it is also checked against scipy's HiGHS LP;
  * the linear program of stochastic shortest paths (Bertsekas & Tsitsiklis
    1991, Math. Oper. Res. 16(3); recalled from memory) solved with HiGHS,
    and scipy's sparse solver for the value of sluice's policy;
  * Howard 1960, "Dynamic Programming and Markov Processes", MIT Press,
    toymaker example: optimal gain 2 per period (recalled from memory; also
    derived exactly here by solving the gain/bias equations over the
    rationals for all four policies);
  * the dual LP of the average-reward problem (Puterman 1994, Section 8.8,
    recalled from memory) solved with HiGHS, and the stationary
    distribution of sluice's policy computed with numpy.

Also: improper and multichain models are refused naming a state; 1, 2 and
3 ranks agree; resuming from a checkpoint gives the same answer; verify
fails on tampered files; policy iteration checkpoints, stops on signals and
resumes where its log says, and falls back half-way to value iteration.

usage: [OBJ_PARTS=finite,total,average,pi,ranks,fallback,checkpoints,generator,pi_checkpoints,pi_midway]
       test_objectives.py SLUICE_BINARY WORKDIR
"""

import json
import os
import re
import shutil
import signal
import sys
from fractions import Fraction as F

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402
import objectives_ref as R  # noqa: E402
from test_published import howard_toymaker, to_float_model  # noqa: E402


def imp(binary, mdp, work, name, objective, terminal=None):
    csv = os.path.join(work, name + ".csv")
    h5 = os.path.join(work, name + ".h5")
    mc.write_csv(mdp, csv)
    extra = []
    if terminal is not None:
        tcsv = os.path.join(work, name + "_terminal.csv")
        with open(tcsv, "w") as f:
            f.write("state,terminal_value\n")
            f.write("".join("%d,%r\n" % (s, float(v)) for s, v in reversed(list(enumerate(terminal)))))
        extra = ["--terminal-values", tcsv]
    mc.run_sluice(binary, ["import", csv, "--discount", repr(mdp.gamma),
                           "--objective", objective, "-o", h5,
                           "--states", mdp.n] + extra)
    return h5


def run_ranks(binary, nranks, args, expect=(0,)):
    """Run sluice on nranks ranks (1: no launcher at all)."""
    if nranks == 1:
        os.environ.pop("SLUICE_LAUNCH", None)
        return mc.run_sluice(binary, args, expect=expect)
    os.environ["SLUICE_LAUNCH"] = "%s -n %d --oversubscribe" % (mc.mpiexec(),
                                                                 nranks)
    try:
        return mc.run_sluice(binary, args, expect=expect)
    finally:
        os.environ.pop("SLUICE_LAUNCH", None)


def dyadic_probs(rng, m, bits=10):
    d = 2 ** bits
    cuts = np.sort(rng.choice(d - 1, size=m - 1, replace=False) + 1)
    return np.diff(np.concatenate([[0], cuts, [d]])) / d


def random_ssp(seed, n, n_abs=2):
    """Invented random model (no source): states 0..n_abs-1 absorb; every
    other pair moves to an absorbing state with probability >= 1/8, so every
    policy reaches absorption."""
    rng = np.random.default_rng(seed)
    states = []
    for s in range(n):
        if s < n_abs:
            states.append([(0, [(s, 1.0, 0.0)])])
            continue
        acts = []
        for a in sorted(rng.choice(6, size=rng.integers(1, 4), replace=False)):
            m = int(rng.integers(1, 4))
            tgt = rng.choice(np.arange(n_abs, n), size=min(m, n - n_abs),
                             replace=False)
            p = dyadic_probs(rng, len(tgt) + 1)
            q_abs = 0.125 + p[0] * 0.5            # absorption >= 1/8
            rest = (1 - q_abs) * p[1:] / p[1:].sum()
            tr = [(int(rng.integers(0, n_abs)), float(q_abs),
                   float(rng.uniform(-1, 1)))]
            tr += [(int(j), float(x), float(rng.uniform(-1, 1)))
                   for j, x in zip(tgt, rest)]
            acts.append((int(a), tr))
        states.append(acts)
    return states


def random_unichain(seed, n):
    """Invented random model (no source): every pair returns to state 0 with
    positive probability, so every policy has one recurrent class."""
    rng = np.random.default_rng(seed)
    states = []
    for s in range(n):
        acts = []
        for a in sorted(rng.choice(5, size=rng.integers(1, 4), replace=False)):
            m = int(rng.integers(1, 4))
            tgt = rng.choice(np.arange(1, n), size=min(m, n - 1), replace=False)
            p = dyadic_probs(rng, len(tgt) + 1)
            tr = [(0, float(p[0]), float(rng.uniform(-1, 1)))]
            tr += [(int(j), float(x), float(rng.uniform(-1, 1)))
                   for j, x in zip(tgt, p[1:])]
            acts.append((int(a), tr))
        states.append(acts)
    return states


def float_states(states, gamma):
    return mc.make_mdp(len(states), gamma, states)


# ----------------------------------------------------------------------------

def check_finite(chk, binary, work):
    for seed, gamma, H in ((11, 0.95, 7), (12, 1.0, 12)):
        mdp = mc.random_mdp(seed, 60, gamma, actions=(1, 4), successors=(1, 4))
        tag = "finite seed %d H %d" % (seed, H)
        # terminal values stored in the model (invented numbers), given to
        # import in reverse state order
        term = np.random.default_rng(seed + 100).uniform(-3, 3, mdp.n)
        model = imp(binary, mdp, work, "fin%d" % seed, "finite", terminal=term)
        with h5py.File(model, "r") as f:
            stored = f["terminal_value"][...]
        chk.check(np.array_equal(stored, term), "%s: /terminal_value holds the imported values (h5py)" % (
            "finite seed %d" % seed))
        # the fingerprint covers /terminal_value: an edited value is refused
        bad = os.path.join(work, "fin%d_termedit.h5" % seed)
        shutil.copyfile(model, bad)
        with h5py.File(bad, "r+") as f:
            f["terminal_value"][0] = f["terminal_value"][0] + 1.0
        cp = mc.run_sluice(binary, ["solve", bad, "-o", os.path.join(work, "x.h5"), "--horizon", H],
                           expect=(mc.EXIT_DATAERR,))
        chk.check("fingerprint" in cp.stderr, "finite seed %d: an edited /terminal_value is caught by the "
                  "fingerprint" % seed, cp.stderr[-300:])
        # the objective's facts in info
        info = json.loads(mc.run_sluice(binary, ["info", model, "--json"]).stdout)
        chk.check(info["objective"] == "finite" and info["terminal_values"] is True
                  and info["terminal_value_min"] == term.min() and info["terminal_value_max"] == term.max(),
                  "finite seed %d: info reports the objective and the terminal values' range" % seed, "%s" % info)
        sol = os.path.join(work, "fin%d_sol.h5" % seed)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--horizon", H])
        s = mc.read_solution(sol)
        si = json.loads(mc.run_sluice(binary, ["info", sol, "--json"]).stdout)
        chk.check(si["objective"] == "finite" and si["horizon"] == H and si["terminal"] == "model /terminal_value",
                  "%s: info reports the objective, the horizon and where the terminal values came from" % tag,
                  "%s" % si)
        V, pol = R.backward_induction(mdp, H, term)
        with h5py.File(sol, "r") as f:
            SV = np.array([f["stage/value_%06d" % t][...] for t in range(H + 1)])
            SP = np.array([f["stage/policy_%06d" % t][...] for t in range(H)])
        # source: numpy backward induction (Puterman 1994, Section 4.5)
        err = np.max(np.abs(SV - V))
        chk.check(err <= 1e-10 * (1 + np.max(np.abs(V))),
                  "%s: every stage value equals numpy backward induction" % tag,
                  "max diff %.3g" % err)
        chk.check(np.array_equal(s["value"], SV[0]),
                  "%s: /value is stage 0" % tag)
        pairs = []
        bad = 0
        for t in range(H):
            pr, b = mdp.pairs_of_policy(SP[t])
            bad += len(b)
            pairs.append(pr)
        chk.check(bad == 0, "%s: stage policies use available actions" % tag)
        vpi = R.finite_policy_value(mdp, pairs, term)
        loss = np.max(V[0] - vpi)
        chk.check(loss <= s["policy_loss_bound"] + 1e-12 and loss <= 1e-9,
                  "%s: stage policy's value (numpy) equals the optimum within "
                  "the certified loss" % tag,
                  "loss %.3g, bound %.3g" % (loss, s["policy_loss_bound"]))
        chk.check(0 < s["value_error_bound"] <= 1e-9,
                  "%s: certificate is a small positive roundoff bound" % tag,
                  "%.3g" % s["value_error_bound"])
        mc.run_sluice(binary, ["verify", model, sol])
        # tampering one stage value by more than the tolerance fails verify
        bad_sol = os.path.join(work, "fin%d_bad.h5" % seed)
        shutil.copy(sol, bad_sol)
        with h5py.File(bad_sol, "r+") as f:
            f["stage/value_000003"][5] += 1e-4
        cp = mc.run_sluice(binary, ["verify", model, bad_sol, "--json"],
                           expect=(65,))
        js = __import__("json").loads(cp.stdout)
        # the change of 1e-4 at stage 3 is a stage-3 residual of 1e-4, worth
        # g^3 1e-4 at stage 0: both bounds must account for it
        need = gamma ** 3 * 1e-4 * 0.99
        chk.check(not js["certified"] and js["value_error_bound"] >= need
                  and js["policy_loss_bound"] >= need,
                  "%s: verify rejects a tampered stage value; both bounds "
                  "cover the change" % tag,
                  "value %.3g policy %.3g need %.3g" % (
                      js["value_error_bound"], js["policy_loss_bound"], need))
        # tampering the terminal stage is caught against the model's dataset
        shutil.copy(sol, bad_sol)
        with h5py.File(bad_sol, "r+") as f:
            f["stage/value_%06d" % H][2] += 1.0
        cp = mc.run_sluice(binary, ["verify", model, bad_sol], expect=(65,))
        chk.check("terminal" in cp.stderr,
                  "%s: verify rejects a changed terminal stage" % tag,
                  cp.stderr.strip()[-200:])
    # --terminal from another solution (a discounted one of the same states)
    mdp = mc.random_mdp(13, 40, 0.9)
    disc = mc.import_model(binary, mdp, work, "disc13")
    dsol = os.path.join(work, "disc13_sol.h5")
    mc.run_sluice(binary, ["solve", disc, "-o", dsol, "--tolerance", "1e-10"])
    vd = mc.read_solution(dsol)["value"]
    fin = imp(binary, mdp, work, "fin13", "finite")
    sol = os.path.join(work, "fin13_sol.h5")
    mc.run_sluice(binary, ["solve", fin, "-o", sol, "--horizon", 5,
                           "--terminal", dsol])
    V, _ = R.backward_induction(mdp, 5, vd)
    got = mc.read_solution(sol)["value"]
    chk.check(np.max(np.abs(got - V[0])) <= 1e-10 * (1 + np.max(np.abs(V[0]))),
              "finite --terminal SOLUTION: stage 0 equals numpy backward "
              "induction from that solution's values")
    # and closing with the discounted optimum reproduces it (v* = T^5 v*)
    chk.check(np.max(np.abs(got - vd)) <= 1e-8,
              "finite closed with the discounted optimum returns it "
              "(v* is a fixed point of T; Puterman 1994, Thm 6.2.2)",
              "max diff %.3g" % np.max(np.abs(got - vd)))
    cp = mc.run_sluice(binary, ["solve", fin, "-o", sol], expect=(64,))
    chk.check("--horizon" in cp.stderr, "finite without --horizon: usage error")


def check_total(chk, binary, work):
    # gambler's ruin, bold play closed form (Dubins & Savage 1965, ch. 5;
    # Billingsley 1995, Section 7; recalled from memory)
    for N, p in ((16, F(2, 5)), (32, F(1, 3))):
        tag = "total gambler's ruin N=%d p=%s" % (N, p)
        states = R.gamblers_ruin_states(N, p)
        mdp = to_float_model(states, F(1))
        model = imp(binary, mdp, work, "gr%d" % N, "total")
        sol = os.path.join(work, "gr%d_sol.h5" % N)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-10"])
        s = mc.read_solution(sol)
        exact = np.array([float(R.bold_play_exact(i, N, p)) for i in range(N)])
        err = np.max(np.abs(s["value"][:N] - exact))
        chk.check(err <= 1e-10 and err <= s["value_error_bound"] + 1e-15,
                  "%s: value = bold-play probability within the certified "
                  "bound" % tag, "err %.3g bound %.3g" % (err, s["value_error_bound"]))
        lp = R.total_lp(mdp)
        chk.check(np.max(np.abs(lp[:N] - exact)) <= 1e-9,
                  "%s: HiGHS LP agrees with the closed form" % tag)
        pairs, bad = mdp.pairs_of_policy(s["policy"])
        vpi = R.total_policy_value(mdp, pairs)
        chk.check(np.max(exact - vpi[:N]) <= 1e-9,
                  "%s: sluice's policy (spsolve) attains the optimum" % tag,
                  "%.3g" % np.max(exact - vpi[:N]))
        mc.run_sluice(binary, ["verify", model, sol])
    # random absorbing models against the LP (HiGHS) and spsolve
    for seed in (21, 22, 23):
        tag = "total random seed %d" % seed
        mdp = float_states(random_ssp(seed, 80), 1.0)
        model = imp(binary, mdp, work, "ssp%d" % seed, "total")
        sol = os.path.join(work, "ssp%d_sol.h5" % seed)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-9"])
        s = mc.read_solution(sol)
        # info: the objective's facts of the model and of the solution
        n_abs = int(np.sum(R.absorbing_states(mdp)))
        mi = json.loads(mc.run_sluice(binary, ["info", model, "--json"]).stdout)
        si = json.loads(mc.run_sluice(binary, ["info", sol, "--json"]).stdout)
        chk.check(mi["objective"] == "total" and mi["n_absorbing"] == n_abs and si["objective"] == "total"
                  and si["n_absorbing"] == n_abs and si["steps_bound_max"] == s["steps_bound_max"],
                  "%s: info reports the objective and %d absorbing states (numpy count) for model and "
                  "solution" % (tag, n_abs), "model %s / solution %s" % (mi.get("n_absorbing"), si.get("n_absorbing")))
        lp = R.total_lp(mdp)
        err = np.max(np.abs(s["value"] - lp))
        chk.check(err <= 1e-9 and err <= s["value_error_bound"] + 1e-9,
                  "%s: value equals HiGHS LP optimum within the bound" % tag,
                  "err %.3g bound %.3g" % (err, s["value_error_bound"]))
        pairs, _ = mdp.pairs_of_policy(s["policy"])
        vpi = R.total_policy_value(mdp, pairs)
        chk.check(np.max(lp - vpi) <= s["policy_loss_bound"] + 1e-9,
                  "%s: policy loss (spsolve vs LP) within the certified "
                  "bound" % tag, "%.3g" % np.max(lp - vpi))
        # the stored steps bound really bounds expected steps of the policy
        A = R.absorbing_states(mdp)
        T = np.nonzero(~A)[0]
        Ppi, _ = mdp.policy_system(pairs)
        import scipy.sparse as sp
        import scipy.sparse.linalg as sla
        steps = sla.spsolve((sp.identity(len(T), format="csc")
                             - Ppi[T][:, T]).tocsc(), np.ones(len(T)))
        with h5py.File(sol, "r") as f:
            w = f["steps_bound"][...]
        chk.check(np.all(steps <= w[T] + 1e-9),
                  "%s: /steps_bound >= expected steps of the policy (spsolve)"
                  % tag)
        mc.run_sluice(binary, ["verify", model, sol])
        if seed == 21:
            bad_sol = os.path.join(work, "ssp_bad.h5")
            shutil.copy(sol, bad_sol)
            with h5py.File(bad_sol, "r+") as f:
                f["value"][10] += 1e-5
            mc.run_sluice(binary, ["verify", model, bad_sol], expect=(65,))
            chk.check(True, "total: verify rejects a tampered value (exit 65)")
            shutil.copy(sol, bad_sol)
            with h5py.File(bad_sol, "r+") as f:
                w = f["steps_bound"][...]
                f["steps_bound"][...] = 0.5 * w
            cp = mc.run_sluice(binary, ["verify", model, bad_sol], expect=(65,))
            chk.check("expected steps" in cp.stderr,
                      "total: verify rejects a shrunken steps bound",
                      cp.stderr.strip()[-200:])
    # honesty of the bounds away from convergence: stopped early, the
    # claimed bounds must still cover the true error (LP reference)
    mdp = float_states(random_ssp(26, 80), 1.0)
    model = imp(binary, mdp, work, "ssp26", "total")
    lp = R.total_lp(mdp)
    for it in (1, 2, 4):
        sol = os.path.join(work, "ssp26_%d.h5" % it)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--max-iterations",
                               it], expect=(75,))
        s = mc.read_solution(sol)
        err = np.max(np.abs(s["value"] - lp))
        pairs, _ = mdp.pairs_of_policy(s["policy"])
        loss = np.max(lp - R.total_policy_value(mdp, pairs))
        chk.check(err <= s["value_error_bound"] + 1e-9 and
                  loss <= s["policy_loss_bound"] + 1e-9 and
                  s["value_error_bound"] < 10 * err + 1e-6,
                  "total after %d sweep(s): true error and loss (LP, spsolve) "
                  "within the claimed bounds, bound not vacuous" % it,
                  "err %.3g <= %.3g, loss %.3g <= %.3g" % (
                      err, s["value_error_bound"], loss, s["policy_loss_bound"]))
    # improper policy: state 3 can loop on itself (action 7) forever
    st = random_ssp(24, 10)
    st[3] = st[3] + [(7, [(3, 1.0, -0.5)])]
    mdp = float_states(st, 1.0)
    model = imp(binary, mdp, work, "improper", "total")
    cp = mc.run_sluice(binary, ["solve", model, "-o",
                                os.path.join(work, "improper_sol.h5")],
                       expect=(65,))
    chk.check("state 3 with action 7" in cp.stderr and "improper" in cp.stderr,
              "total: improper policy reported by state and action",
              cp.stderr.strip()[-300:])
    chk.check(not os.path.exists(os.path.join(work, "improper_sol.h5")),
              "total: no solution file written for a refused model")
    # no absorbing state at all
    mdp = mc.random_mdp(25, 10, 1.0)
    model = imp(binary, mdp, work, "noabs", "total")
    cp = mc.run_sluice(binary, ["solve", model, "-o",
                                os.path.join(work, "noabs_sol.h5")],
                       expect=(65,))
    chk.check("no absorbing state" in cp.stderr,
              "total: model without absorbing state refused")


def check_average(chk, binary, work):
    # Howard 1960 toymaker: optimal gain 2 (recalled from memory), derived
    # exactly here over the rationals for all four policies
    states = howard_toymaker()
    gains = {c: R.exact_gain(states, c)[0] for c in
             ((0, 0), (0, 1), (1, 0), (1, 1))}
    chk.check(max(gains.values()) == F(2) and gains[(1, 1)] == F(2),
              "toymaker: exact gains give optimum 2 with (advertise, research)",
              str(gains))
    mdp = to_float_model(states, F(1))
    model = imp(binary, mdp, work, "toy", "average")
    sol = os.path.join(work, "toy_sol.h5")
    mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-10"])
    s = mc.read_solution(sol)
    chk.check(abs(s["gain"] - 2.0) <= 1e-10 and s["gain_lower"] <= 2.0 <= s["gain_upper"],
              "toymaker: gain 2 (Howard 1960) inside the certified bounds",
              "%r [%r, %r]" % (s["gain"], s["gain_lower"], s["gain_upper"]))
    chk.check(list(s["policy"]) == [2, 2],
              "toymaker: policy advertise/research", str(s["policy"]))
    si = json.loads(mc.run_sluice(binary, ["info", sol, "--json"]).stdout)
    chk.check(si["objective"] == "average" and si["gain"] == s["gain"] and si["gain_lower"] == s["gain_lower"]
              and si["gain_upper"] == s["gain_upper"], "toymaker: info reports the objective and the gain bounds",
              "%s" % si)
    mc.run_sluice(binary, ["verify", model, sol])
    bad_sol = os.path.join(work, "toy_bad.h5")
    shutil.copy(sol, bad_sol)
    with h5py.File(bad_sol, "r+") as f:
        f.attrs["gain"] = 2.001
    mc.run_sluice(binary, ["verify", model, bad_sol], expect=(65,))
    chk.check(True, "average: verify rejects a tampered gain (exit 65)")
    shutil.copy(sol, bad_sol)
    with h5py.File(bad_sol, "r+") as f:
        f["value"][1] += 0.01
    mc.run_sluice(binary, ["verify", model, bad_sol], expect=(65,))
    chk.check(True, "average: verify rejects a tampered bias (exit 65)")
    # random unichain models against the dual LP (HiGHS)
    for seed in (31, 32, 33):
        tag = "average random seed %d" % seed
        mdp = float_states(random_unichain(seed, 70), 1.0)
        model = imp(binary, mdp, work, "avg%d" % seed, "average")
        sol = os.path.join(work, "avg%d_sol.h5" % seed)
        for tau in ("0.5", "0.2"):
            mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance",
                                   "1e-8", "--aperiodicity", tau])
            s = mc.read_solution(sol)
            g_lp, _ = R.average_dual_lp(mdp)
            g_pi, _, _ = R.average_policy_iteration(mdp)
            # HiGHS solves to its default feasibility tolerance of 1e-7
            # (HiGHS options documentation; value recalled from memory),
            # so the LP confirms the exact policy-iteration gain to that
            # accuracy, and the exact gain must lie inside sluice's bounds
            chk.check(abs(g_lp - g_pi) <= 1e-7,
                      "%s: dual LP (HiGHS) and numpy policy iteration agree"
                      % tag, "%r vs %r" % (g_lp, g_pi))
            slack = 1e-13 * (1 + abs(g_pi))
            chk.check(s["gain_lower"] - slack <= g_pi <= s["gain_upper"] + slack
                      and abs(s["gain"] - g_pi) <= 1e-8,
                      "%s tau %s: exact gain inside the certified bounds"
                      % (tag, tau),
                      "ref %r, [%r, %r]" % (g_pi, s["gain_lower"], s["gain_upper"]))
            g_lp = g_pi
            pairs, _ = mdp.pairs_of_policy(s["policy"])
            gpi = R.policy_gain(mdp, pairs)
            chk.check(g_lp - gpi <= s["policy_loss_bound"] + 1e-9,
                      "%s tau %s: policy gain (stationary distribution) within "
                      "the certified loss" % (tag, tau),
                      "%.3g vs %.3g" % (g_lp - gpi, s["policy_loss_bound"]))
            mc.run_sluice(binary, ["verify", model, sol])
    # honesty away from convergence: the exact gain inside the bounds
    mdp = float_states(random_unichain(34, 70), 1.0)
    model = imp(binary, mdp, work, "avg34", "average")
    g_pi, _, _ = R.average_policy_iteration(mdp)
    for it in (1, 3, 9):
        sol = os.path.join(work, "avg34_%d.h5" % it)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--max-iterations",
                               it], expect=(75,))
        s = mc.read_solution(sol)
        pairs, _ = mdp.pairs_of_policy(s["policy"])
        loss = g_pi - R.policy_gain(mdp, pairs)
        chk.check(s["gain_lower"] <= g_pi <= s["gain_upper"] and
                  loss <= s["policy_loss_bound"] + 1e-12,
                  "average after %d iteration(s): exact gain inside the "
                  "claimed bounds, policy loss within its bound" % it,
                  "%r in [%r, %r]; loss %.3g <= %.3g" % (
                      g_pi, s["gain_lower"], s["gain_upper"], loss,
                      s["policy_loss_bound"]))
    # multichain: two closed classes with different rewards
    st = [[(0, [(0, 1.0, 1.0)]), (1, [(1, 1.0, 0.0)])],
          [(0, [(1, 1.0, 0.0)])],
          [(0, [(2, 0.5, 3.0), (3, 0.5, 3.0)])],
          [(0, [(2, 1.0, 3.0)])]]
    mdp = float_states(st, 1.0)
    model = imp(binary, mdp, work, "multi", "average")
    cp = mc.run_sluice(binary, ["solve", model, "-o",
                                os.path.join(work, "multi_sol.h5")],
                       expect=(65,))
    chk.check("multichain" in cp.stderr, "average: multichain model refused",
              cp.stderr.strip()[-300:])


def check_ranks_and_resume(chk, binary, work):
    if mc.mpiexec() is None:
        chk.note("no mpiexec: rank comparisons skipped")
        return
    cases = [("total", float_states(random_ssp(41, 120), 1.0), []),
             ("average", float_states(random_unichain(42, 120), 1.0), []),
             ("finite", mc.random_mdp(43, 120, 0.97), ["--horizon", "9"])]
    for obj, mdp, extra in cases:
        model = imp(binary, mdp, work, "rk_" + obj, obj)
        sols = []
        for nr in (1, 2, 3):
            out = os.path.join(work, "rk_%s_%d.h5" % (obj, nr))
            run_ranks(binary, nr, ["solve", model, "-o", out, "--tolerance",
                                   "1e-9"] + extra)
            sols.append(mc.read_solution(out))
            run_ranks(binary, nr, ["verify", model, out])
        d = max(np.max(np.abs(s["value"] - sols[0]["value"])) for s in sols)
        lim = 0.0 if obj == "finite" else 2e-9
        if obj != "finite":
            # policy iteration: the matrix gathered on rank 0 is the same for
            # any rank count, so the answers agree to roundoff
            pis = []
            for nr in (1, 2, 3):
                out = os.path.join(work, "rkpi_%s_%d.h5" % (obj, nr))
                run_ranks(binary, nr, ["solve", model, "-o", out, "--method", "pi", "--tolerance", "1e-9"])
                pis.append(mc.read_solution(out))
                run_ranks(binary, nr, ["verify", model, out])
            dp = max(np.max(np.abs(s["value"] - pis[0]["value"])) for s in pis)
            same = all(np.array_equal(s["policy"], pis[0]["policy"]) for s in pis)
            # total: the values; average: the gains (the bias of value iteration
            # is normalised differently)
            dv = (np.max(np.abs(pis[0]["value"] - sols[0]["value"])) if obj == "total"
                  else abs(pis[0]["gain"] - sols[0]["gain"]))
            chk.check(dp <= 1e-12 * (1 + np.max(np.abs(pis[0]["value"]))) and same and dv <= 2e-9,
                      "%s --method pi: 1, 2 and 3 ranks agree (policy equal, values within 1e-12) and match "
                      "value iteration" % obj, "max diff %.3g, vs VI %.3g" % (dp, dv))
        chk.check(d <= lim, "%s: 1, 2 and 3 ranks agree (%s)" % (obj,
                  "bitwise" if lim == 0 else "within 2 tolerances"),
                  "max diff %.3g" % d)
        # resume: stop early with a checkpoint, then continue on 2 ranks
        ck = os.path.join(work, "ck_" + obj)
        shutil.rmtree(ck, ignore_errors=True)
        os.makedirs(ck)
        part = os.path.join(work, "part_%s.h5" % obj)
        stop = "4" if obj == "finite" else "6"
        run_ranks(binary, 1, ["solve", model, "-o", part, "--tolerance",
                              "1e-9", "--checkpoint", ck, "--max-iterations",
                              stop] + extra, expect=(75,))
        res = os.path.join(work, "res_%s.h5" % obj)
        cp = run_ranks(binary, 2, ["solve", model, "-o", res, "--tolerance",
                                   "1e-9", "--checkpoint", ck, "--resume"]
                       + extra)
        chk.check("resumed" in cp.stderr, "%s: resume used the checkpoint" % obj,
                  cp.stderr.strip()[-300:])
        r = mc.read_solution(res)
        d = np.max(np.abs(r["value"] - sols[0]["value"]))
        chk.check(d <= lim, "%s: resumed run gives the same answer" % obj,
                  "max diff %.3g" % d)
        run_ranks(binary, 3, ["verify", model, res])


def check_policy_iteration(chk, binary, work):
    """--method pi for total and average (UMFPACK evaluation) against LPs
    solved by HiGHS (scipy linprog): the LP of stochastic shortest paths
    (Bertsekas & Tsitsiklis 1991, recalled) and the dual LP of the average
    reward (Puterman 1994, Section 8.8, recalled); verify certifies the output
    and rejects it once a value is changed."""
    for seed in (51, 52, 53):
        tag = "pi total random seed %d" % seed
        mdp = float_states(random_ssp(seed, 90), 1.0)
        model = imp(binary, mdp, work, "pit%d" % seed, "total")
        sol = os.path.join(work, "pit%d_sol.h5" % seed)
        cp = mc.run_sluice(binary, ["solve", model, "-o", sol, "--method", "pi", "--tolerance", "1e-9"])
        s = mc.read_solution(sol)
        lp = R.total_lp(mdp)
        err = float(np.max(np.abs(s["value"] - lp)))
        # HiGHS solves to its default feasibility tolerance of 1e-7 (recalled from memory)
        chk.check(s["method"] == "pi-total" and err <= 1e-7 * (1 + np.max(np.abs(lp))),
                  "%s: value equals the HiGHS LP optimum" % tag, "err %.3g, method %s" % (err, s["method"]))
        pairs, _ = mdp.pairs_of_policy(s["policy"])
        vpi = R.total_policy_value(mdp, pairs)
        d = float(np.max(np.abs(vpi - s["value"])))
        chk.check(d <= 1e-9 * (1 + np.max(np.abs(vpi))) and s["value_error_bound"] <= 1e-9,
                  "%s: the value is the policy's own (scipy spsolve) and certified" % tag,
                  "diff %.3g, bound %.3g" % (d, s["value_error_bound"]))
        chk.check("policy iteration" in cp.stderr, "%s: the log shows the policy iterations" % tag)
        mc.run_sluice(binary, ["verify", model, sol])
        bad = os.path.join(work, "pit%d_bad.h5" % seed)
        shutil.copy(sol, bad)
        with h5py.File(bad, "r+") as f:
            f["value"][5] += 1e-4
        mc.run_sluice(binary, ["verify", model, bad], expect=(65,))
        chk.check(True, "%s: verify certifies the output and rejects a changed value" % tag)
    for seed in (54, 55, 56):
        tag = "pi average random seed %d" % seed
        mdp = float_states(random_unichain(seed, 70), 1.0)
        model = imp(binary, mdp, work, "pia%d" % seed, "average")
        sol = os.path.join(work, "pia%d_sol.h5" % seed)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--method", "pi", "--tolerance", "1e-9"])
        s = mc.read_solution(sol)
        g_lp, _ = R.average_dual_lp(mdp)
        g_pi, _, _ = R.average_policy_iteration(mdp)
        chk.check(s["method"] == "pi-average" and abs(s["gain"] - g_lp) <= 1e-7 and abs(s["gain"] - g_pi) <= 1e-10,
                  "%s: gain equals the dual LP (HiGHS, 1e-7) and numpy policy iteration (1e-10)" % tag,
                  "%r vs LP %r, numpy %r" % (s["gain"], g_lp, g_pi))
        chk.check(s["gain_lower"] <= g_pi + 1e-12 and g_pi - 1e-12 <= s["gain_upper"]
                  and s["gain_upper"] - s["gain_lower"] <= 1e-9,
                  "%s: the exact gain lies in the certified bounds" % tag,
                  "[%r, %r]" % (s["gain_lower"], s["gain_upper"]))
        chk.check(s["value"][0] == 0.0, "%s: the bias is normalised h(0) = 0" % tag)
        mc.run_sluice(binary, ["verify", model, sol])
        bad = os.path.join(work, "pia%d_bad.h5" % seed)
        shutil.copy(sol, bad)
        with h5py.File(bad, "r+") as f:
            f["value"][3] += 1e-4
        mc.run_sluice(binary, ["verify", model, bad], expect=(65,))
        chk.check(True, "%s: verify certifies the output and rejects a changed bias" % tag)


def check_pi_fallback(chk, binary, work):
    """--method pi whose direct solve is declined (the discounted pi's guards:
    --memory-limit, --direct-time-limit, set tiny here) falls back to value
    iteration / relative value iteration, says why in the log and the report,
    and still gives the certified answer: checked against the same HiGHS LPs
    as check_policy_iteration (Bertsekas & Tsitsiklis 1991; Puterman 1994,
    Section 8.8; both recalled from memory). --strict-memory turns the
    memory case into exit 65 with nothing written."""
    cases = [("total", float_states(random_ssp(51, 90), 1.0), "gs-total", "value iteration"),
             ("average", float_states(random_unichain(54, 70), 1.0), "rvi", "relative value iteration")]
    for obj, mdp, vi_method, vi_words in cases:
        model = imp(binary, mdp, work, "fb_" + obj, obj)
        if obj == "total":
            ref = R.total_lp(mdp)
        else:
            ref, _ = R.average_dual_lp(mdp)
        guards = [("memory", ["--memory-limit", "1"], "over the limit of"),
                  ("time", ["--direct-time-limit", "1e-12"], "direct-solve time limit")]
        for nranks in ((1, 2) if mc.mpiexec() else (1,)):
            for gname, opt, why in guards:
                tag = "%s --method pi, %s guard tiny, %d rank(s)" % (obj, gname, nranks)
                sol = os.path.join(work, "fb_%s_%s_%d.h5" % (obj, gname, nranks))
                rep = os.path.join(work, "fb_%s_%s_%d.json" % (obj, gname, nranks))
                cp = run_ranks(binary, nranks, ["solve", model, "-o", sol, "--method", "pi", "--tolerance", "1e-9",
                                                "--report", rep] + opt)
                s = mc.read_solution(sol)
                with open(rep) as f:
                    r = json.load(f)
                chk.check("falling back to " + vi_words in cp.stderr and why in cp.stderr,
                          "%s: the log says policy iteration fell back to %s and why" % (tag, vi_words),
                          cp.stderr.strip()[-400:])
                chk.check(s["method"] == vi_method and r["method"] == vi_method
                          and why in r.get("policy_iteration_fallback", ""),
                          "%s: method %s recorded, reason in the report" % (tag, vi_method),
                          "file %s, report %s / %r" % (s["method"], r["method"], r.get("policy_iteration_fallback")))
                if obj == "total":
                    err = float(np.max(np.abs(s["value"] - ref)))
                    ok = err <= 1e-7 * (1 + np.max(np.abs(ref))) and s["value_error_bound"] <= 1e-9
                else:
                    err = abs(s["gain"] - ref)
                    ok = err <= 1e-7 and s["gain_upper"] - s["gain_lower"] <= 1e-9
                chk.check(ok and bool(s["converged"]),
                          "%s: certified and equal to the HiGHS LP (1e-7)" % tag, "err %.3g" % err)
                run_ranks(binary, nranks, ["verify", model, sol])
        out = os.path.join(work, "fb_%s_strict.h5" % obj)
        cp = mc.run_sluice(binary, ["solve", model, "-o", out, "--method", "pi", "--memory-limit", "1",
                                    "--strict-memory"], expect=(65,))
        chk.check(not os.path.exists(out) and "--strict-memory" in cp.stderr,
                  "%s --method pi --strict-memory over the limit: exit 65, nothing written" % obj,
                  cp.stderr.strip()[-300:])


def dir_state(d):
    """Names and contents of every file in d but the lock file (which holds
    the pid of the last run), to see that nothing changed."""
    out = {}
    for name in sorted(os.listdir(d)):
        if name == ".lock":
            continue
        with open(os.path.join(d, name), "rb") as f:
            out[name] = f.read()
    return out


def check_checkpoints(chk, binary, work):
    """Checkpoint and resume of the total and average objectives on 1 and 2
    ranks (stopped on one rank count, resumed on the other and on the same):
    the resumed answer equals an uninterrupted run within two tolerances and
    verifies. A checkpoint directory of another model, another objective or
    the other kind (finite-horizon stages vs value-iteration files) is refused
    on --resume with exit 65, the directory left byte for byte as it was and
    no solution written."""
    cases = [("total", float_states(random_ssp(61, 100), 1.0)),
             ("average", float_states(random_unichain(62, 100), 1.0))]
    models = {}
    for obj, mdp in cases:
        model = imp(binary, mdp, work, "ckm_" + obj, obj)
        models[obj] = model
        full = os.path.join(work, "ckm_%s_full.h5" % obj)
        mc.run_sluice(binary, ["solve", model, "-o", full, "--tolerance", "1e-9"])
        ref = mc.read_solution(full)
        ranks = [(1, 1), (1, 2), (2, 1)] if mc.mpiexec() else [(1, 1)]
        for stop_r, resume_r in ranks:
            tag = "%s: stopped on %d rank(s), resumed on %d" % (obj, stop_r, resume_r)
            ck = os.path.join(work, "ckm_%s_%d%d" % (obj, stop_r, resume_r))
            shutil.rmtree(ck, ignore_errors=True)
            part = os.path.join(work, "ckm_%s_part.h5" % obj)
            run_ranks(binary, stop_r, ["solve", model, "-o", part, "--tolerance", "1e-9", "--checkpoint", ck,
                                       "--max-iterations", "5"], expect=(75,))
            chk.check(any(n.startswith("ckpt-") for n in os.listdir(ck)), "%s: a checkpoint was written" % tag)
            out = os.path.join(work, "ckm_%s_res.h5" % obj)
            cp = run_ranks(binary, resume_r, ["solve", model, "-o", out, "--tolerance", "1e-9", "--checkpoint", ck,
                                              "--resume"])
            r = mc.read_solution(out)
            if obj == "total":
                d = float(np.max(np.abs(r["value"] - ref["value"])))
            else:
                d = abs(r["gain"] - ref["gain"])
            chk.check("resumed at iteration 5" in cp.stderr and d <= 2e-9 and bool(r["converged"]),
                      "%s: resumed at iteration 5, same answer within 2 tolerances" % tag,
                      "diff %.3g; %s" % (d, cp.stderr.strip()[-200:]))
            run_ranks(binary, resume_r, ["verify", model, out])
    # refusals: build one directory of each kind, then point other runs at it
    fin = imp(binary, mc.random_mdp(63, 100, 0.97), work, "ckm_finite", "finite")
    other_total = imp(binary, float_states(random_ssp(64, 100), 1.0), work, "ckm_total2", "total")
    # the same rows as the total model, recorded with another objective
    same_rows_avg = imp(binary, cases[0][1], work, "ckm_total_as_average", "average")
    dirs = {}
    for kind, model, extra in [("total", models["total"], []), ("finite", fin, ["--horizon", "9"])]:
        ck = os.path.join(work, "ckm_dir_" + kind)
        shutil.rmtree(ck, ignore_errors=True)
        mc.run_sluice(binary, ["solve", model, "-o", os.path.join(work, "ckm_x.h5"), "--checkpoint", ck,
                               "--max-iterations", "3"] + extra, expect=(75,))
        dirs[kind] = ck
    refusals = [("another total model", other_total, "total", [], "another model"),
                ("the same rows with the average objective", same_rows_avg, "total", [], "another model"),
                ("a finite model in a value-iteration directory", fin, "total", ["--horizon", "9"],
                 "not the stages of a finite-horizon solve"),
                ("a total model in a finite-horizon directory", models["total"], "finite", [],
                 "the stages of a finite-horizon solve"),
                ("an average model in a finite-horizon directory", models["average"], "finite", [],
                 "the stages of a finite-horizon solve")]
    for what, model, kind, extra, words in refusals:
        ck = dirs[kind]
        before = dir_state(ck)
        out = os.path.join(work, "ckm_refused.h5")
        if os.path.exists(out):
            os.remove(out)
        cp = mc.run_sluice(binary, ["solve", model, "-o", out, "--checkpoint", ck, "--resume"] + extra,
                           expect=(65,))
        after = dir_state(ck)
        chk.check(words in cp.stderr and ck in cp.stderr and before == after and not os.path.exists(out),
                  "resume of %s refused (65), naming the checkpoint; directory unchanged, nothing written" % what,
                  cp.stderr.strip()[-300:])
    # a finite run creates its checkpoint directory like the others
    ck = os.path.join(work, "ckm_new", "sub")
    shutil.rmtree(os.path.join(work, "ckm_new"), ignore_errors=True)
    os.makedirs(os.path.join(work, "ckm_new"))
    mc.run_sluice(binary, ["solve", fin, "-o", os.path.join(work, "ckm_y.h5"), "--checkpoint", ck,
                           "--max-iterations", "2", "--horizon", "9"], expect=(75,))
    chk.check(os.path.exists(os.path.join(ck, "finite-stages.h5")),
              "finite: --checkpoint DIR that does not exist yet is created")


def pond_terminal(W, n):
    """Terminal values of tests/data/gen_terminal.c (an invented pond; the
    same formula as its sluice_terminal_value): 0.9 w - 0.04 w^2 + 0.25 x
    for state = w + W x."""
    s = np.arange(n)
    w, x = (s % W).astype(float), (s // W).astype(float)
    return 0.9 * w - 0.04 * w * w + 0.25 * x


def check_generator_terminal(chk, binary, work):
    """Terminal values from a generator's optional sluice_terminal_value():
    `build --objective finite` stores them as /terminal_value (read back with
    h5py), the same on 1 and 2 ranks (fingerprint equal), and the finite
    solve equals numpy backward induction from them (Puterman 1994, Section
    4.5, recalled from memory). Built for another objective, the function is
    not used and no /terminal_value is written."""
    src = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "data", "gen_terminal.c")
    W, H = 9, 6
    fps = []
    for nranks in ((1, 2) if mc.mpiexec() else (1,)):
        tag = "generator terminal values, built on %d rank(s)" % nranks
        model = os.path.join(work, "pond_%d.h5" % nranks)
        run_ranks(binary, nranks, ["build", src, "--objective", "finite", "--param", "levels=%d" % W, "-o", model])
        with h5py.File(model, "r") as f:
            stored = f["terminal_value"][...] if "terminal_value" in f else None
            fps.append(mc._attr(f, "fingerprint"))
        term = pond_terminal(W, 2 * W)
        ok = stored is not None and np.max(np.abs(stored - term)) <= 1e-15 * np.max(np.abs(term))
        chk.check(ok, "%s: /terminal_value holds the generator's values (h5py)" % tag,
                  "stored %s" % (None if stored is None else stored[:4]))
        mdp = mc.read_model(model)
        sol = os.path.join(work, "pond_%d_sol.h5" % nranks)
        run_ranks(binary, nranks, ["solve", model, "-o", sol, "--horizon", H])
        V, _ = R.backward_induction(mdp, H, term)
        with h5py.File(sol, "r") as f:
            SV = np.array([f["stage/value_%06d" % t][...] for t in range(H + 1)])
            src_attr = mc._attr(f, "terminal")
        err = float(np.max(np.abs(SV - V)))
        chk.check(err <= 1e-10 * (1 + np.max(np.abs(V))) and src_attr == "model /terminal_value",
                  "%s: every stage equals numpy backward induction from the generator's terminal values" % tag,
                  "max diff %.3g, terminal %r" % (err, src_attr))
        run_ranks(binary, nranks, ["verify", model, sol])
    chk.check(len(set(fps)) == 1, "generator terminal values: the same fingerprint on 1 and 2 ranks", "%s" % fps)
    disc = os.path.join(work, "pond_disc.h5")
    cp = mc.run_sluice(binary, ["build", src, "--param", "levels=%d" % W, "-o", disc])
    with h5py.File(disc, "r") as f:
        chk.check("terminal_value" not in f and "finite objective only" in cp.stderr,
                  "generator terminal values: not stored for the discounted objective (and the log says so)",
                  cp.stderr.strip()[-300:])


# ---- policy iteration: checkpoints, resume, a fallback half-way -------------

def canal(n, seed, objective, freight):
    """Invented model (no source): a barge works down a canal of n - 1 locks.
    At lock s it may tie up (action 0: the trip ends, reward 0) or go on
    (action 1: a toll of about 1, and at each lock a chance of 1/8 of being
    turned back, which ends the trip); the last lock pays the freight.
    State 0 is the end of a trip: absorbing for the total objective, a new
    trip may start (action 1) for the average one. From the policy 'tie up
    everywhere' policy iteration learns one lock per iteration, from the
    last lock backwards, so it takes many iterations: room for a stop half-way."""
    rng = np.random.default_rng(seed)
    if objective == "total":
        states = [[(0, [(0, 1.0, 0.0)])]]
    else:
        states = [[(0, [(0, 1.0, 0.0)]), (1, [(1, 1.0, -1.0)])]]
    for s in range(1, n):
        a1 = ((1, [(s + 1, 0.875, -1.0 + 0.1 * float(rng.uniform())), (0, 0.125, -1.0)]) if s < n - 1
              else (1, [(0, 1.0, freight)]))
        states.append([(0, [(0, 1.0, 0.0)]), a1])
    return states


def pi_lines(log):
    """{k: text} of the lines 'solve: policy iteration k: ...' of a log."""
    out = {}
    for line in log.splitlines():
        m = re.match(r"solve: policy iteration (\d+): (.*)$", line)
        if m:
            out[int(m.group(1))] = m.group(2)
    return out


def newest_ckpt(d):
    names = mc.checkpoint_files(d)
    return names[-1] if names else None


def check_pi_checkpoints(chk, binary, work):
    """Policy iteration of the total and average objectives checkpoints and
    resumes. Stops: by --max-iterations, by SIGTERM (1 rank) and SIGUSR2 to
    mpiexec (2 ranks) sent once the log shows the first iteration (where it
    stopped is read from the log), and SIGUSR1 (checkpoint, go on). Each
    resumed run must continue where the log says the checkpoint was taken:
    the per-iteration log lines after it and the iteration count equal those
    of an uninterrupted run, the final policy is the same and the values
    (gain) agree within the certificates; the result also equals the HiGHS
    LP of the model (Bertsekas & Tsitsiklis 1991 for total; Puterman 1994,
    Section 8.8 for average; both recalled from memory). The checkpoint
    files are read with h5py: method pi-total / pi-average, and the saved
    policy is greedy for the saved values (numpy). A value-iteration
    checkpoint resumed with --method pi starts from the greedy policy of its
    values; a policy-iteration checkpoint resumed by value iteration goes on
    from its values."""
    multi = mc.mpiexec() is not None
    if not multi:
        chk.note("no mpiexec: the 2-rank cases are skipped")
    for obj, freight in (("total", 60.0), ("average", 400.0)):
        mdp = float_states(canal(24, 71, obj, freight), 1.0)
        model = imp(binary, mdp, work, "pck_" + obj, obj)
        base = ["--method", "pi", "--tolerance", "1e-8"]
        full = os.path.join(work, "pck_%s_full.h5" % obj)
        cp = mc.run_sluice(binary, ["solve", model, "-o", full] + base)
        ref, ref_log = mc.read_solution(full), cp.stderr
        ref_lines = pi_lines(ref_log)
        n_its = len(ref_lines)
        trig = ref_log.index("solve: policy iteration 1:")
        prefix = ref_log.index("\n", trig) + 1  # log bytes through iteration 1
        chk.check(n_its >= 12 and int(ref["iterations"]) == n_its,
                  "%s pi: the canal takes %d policy iterations (>= 12 needed for stops half-way)" % (obj, n_its))
        if obj == "total":
            lp = R.total_lp(mdp)
            err = float(np.max(np.abs(ref["value"] - lp)))
            ok = err <= 1e-7 * (1 + np.max(np.abs(lp)))
        else:
            lp, _ = R.average_dual_lp(mdp)
            err = abs(ref["gain"] - lp)
            ok = err <= 1e-7
        chk.check(ok and bool(ref["converged"]), "%s pi: uninterrupted run certified and equal to the HiGHS LP" % obj,
                  "err %.3g" % err)

        def same_as_ref(tag, out, log, k):
            s = mc.read_solution(out)
            lines = pi_lines(log)
            cont = all(lines.get(i) == ref_lines[i] for i in range(k + 1, n_its + 1)) and \
                not any(i <= k for i in lines)
            chk.check(("resumed policy iteration after iteration %d " % k) in log and cont
                      and int(s["iterations"]) == n_its,
                      "%s: resumed after iteration %d, the later iterations are those of the uninterrupted run"
                      % (tag, k),
                      "iterations %s of %d; %s" % (s.get("iterations"), n_its, log.strip()[-300:]))
            if obj == "total":
                d = float(np.max(np.abs(s["value"] - ref["value"])))
                lim = s["value_error_bound"] + ref["value_error_bound"]
            else:
                d = abs(s["gain"] - ref["gain"])
                lim = (s["gain_upper"] - s["gain_lower"]) + (ref["gain_upper"] - ref["gain_lower"])
            chk.check(bool(s["converged"]) and np.array_equal(s["policy"], ref["policy"]) and d <= lim,
                      "%s: same policy, %s within the certificates" % (tag, "values" if obj == "total" else "gain"),
                      "diff %.3g, limit %.3g" % (d, lim))

        def check_ckpt(tag, ck, k):
            path = newest_ckpt(ck)
            if path is None:
                chk.fail("%s: no checkpoint file" % tag)
                return
            with h5py.File(path, "r") as f:
                meth, it = mc._attr(f, "method"), int(mc._attr(f, "iteration"))
                v, acts = f["value"][...], f["policy"][...].astype(np.int64)
            pairs, bad = mdp.pairs_of_policy(acts)
            q = mdp.q_values(v)
            best = np.maximum.reduceat(q, mdp.first_pair[:-1])
            greedy = len(bad) == 0 and bool(np.all(q[pairs] >= best - 1e-9 * (1 + np.abs(best))))
            chk.check(meth == "pi-" + obj and it == k and greedy,
                      "%s: the checkpoint (h5py) says pi-%s after iteration %d, its policy greedy for its values" %
                      (tag, obj, k), "method %r, iteration %d, greedy %s" % (meth, it, greedy))

        # --max-iterations: stop on one rank count, resume on the other
        for stop_r, res_r in ([(1, 2), (2, 1)] if multi else [(1, 1)]):
            tag = "%s pi: --max-iterations 5 on %d rank(s), resumed on %d" % (obj, stop_r, res_r)
            ck = os.path.join(work, "pck_%s_mi%d" % (obj, stop_r))
            shutil.rmtree(ck, ignore_errors=True)
            part = os.path.join(work, "pck_%s_part.h5" % obj)
            cp = run_ranks(binary, stop_r, ["solve", model, "-o", part, "--checkpoint", ck, "--max-iterations", "5"]
                           + base, expect=(75,))
            chk.check("checkpoint after policy iteration 5 written" in cp.stderr,
                      "%s: the log says the checkpoint holds iteration 5" % tag, cp.stderr.strip()[-300:])
            check_ckpt(tag, ck, 5)
            out = os.path.join(work, "pck_%s_mi%d.h5" % (obj, stop_r))
            cp = run_ranks(binary, res_r, ["solve", model, "-o", out, "--checkpoint", ck, "--resume"] + base)
            same_as_ref(tag, out, cp.stderr, 5)
            run_ranks(binary, res_r, ["verify", model, out])
        # a signal once iteration 1 is logged; the log says where it stopped
        room = prefix + 150  # iteration 1 and part of the next evaluation's log
        for nranks, sig in ([(1, signal.SIGTERM), (2, signal.SIGUSR2)] if multi else [(1, signal.SIGTERM)]):
            tag = "%s pi: %s on %d rank(s)" % (obj, sig.name, nranks)
            ck = os.path.join(work, "pck_%s_sig%d" % (obj, nranks))
            shutil.rmtree(ck, ignore_errors=True)
            part = os.path.join(work, "pck_%s_sig%d_part.h5" % (obj, nranks))
            rc, log, seen = mc.stop_when_logged(binary, nranks, ["solve", model, "-o", part, "--checkpoint", ck] + base,
                                             b"solve: policy iteration 1:", room, sig)
            m = re.findall(r"checkpoint after policy iteration (\d+) written", log)
            k = int(m[-1]) if m else -1
            chk.check(seen and rc == 75 and 1 <= k < n_its,
                      "%s: exit 75 with a checkpoint after iteration %d of %d (from the log)" % (tag, k, n_its),
                      "rc %d, trigger seen %s; %s" % (rc, seen, log.strip()[-400:]))
            abandoned = " (the factorization under way was abandoned)" if "direct solve abandoned" in log else ""
            chk.note("%s: the log shows the stop after iteration %d%s" % (tag, k, abandoned))
            if k < 1:
                continue
            check_ckpt(tag, ck, k)
            out = os.path.join(work, "pck_%s_sig%d.h5" % (obj, nranks))
            cp = run_ranks(binary, nranks, ["solve", model, "-o", out, "--checkpoint", ck, "--resume"] + base)
            same_as_ref(tag, out, cp.stderr, k)
        # SIGUSR1: a checkpoint, and the run goes on to the same answer
        tag = "%s pi: SIGUSR1 on 1 rank" % obj
        ck = os.path.join(work, "pck_%s_usr1" % obj)
        shutil.rmtree(ck, ignore_errors=True)
        out = os.path.join(work, "pck_%s_usr1.h5" % obj)
        rc, log, seen = mc.stop_when_logged(binary, 1, ["solve", model, "-o", out, "--checkpoint", ck] + base,
                                         b"solve: policy iteration 1:", room, signal.SIGUSR1)
        m = re.findall(r"checkpoint after policy iteration (\d+) written", log)
        s = mc.read_solution(out) if rc == 0 else {}
        chk.check(seen and rc == 0 and len(m) == 1 and pi_lines(log) == ref_lines
                  and np.array_equal(s.get("policy"), ref["policy"]),
                  "%s: one checkpoint (after iteration %s), then the same iterations and policy as uninterrupted" %
                  (tag, m[0] if m else "?"), "rc %d; %s" % (rc, log.strip()[-300:]))
        if m:
            chk.note("%s: checkpoint after iteration %s" % (tag, m[0]))
            check_ckpt(tag, ck, int(m[0]))
        # a value-iteration checkpoint, resumed by policy iteration
        tag = "%s: value-iteration checkpoint resumed with --method pi" % obj
        ck = os.path.join(work, "pck_%s_vi" % obj)
        shutil.rmtree(ck, ignore_errors=True)
        mc.run_sluice(binary, ["solve", model, "-o", part, "--checkpoint", ck, "--max-iterations", "3",
                               "--tolerance", "1e-8"], expect=(75,))
        out = os.path.join(work, "pck_%s_vi.h5" % obj)
        cp = mc.run_sluice(binary, ["solve", model, "-o", out, "--checkpoint", ck, "--resume"] + base)
        s = mc.read_solution(out)
        chk.check("starting from the policy greedy for its values" in cp.stderr and s["method"] == "pi-" + obj
                  and bool(s["converged"]) and np.array_equal(s["policy"], ref["policy"]),
                  "%s: starts from the greedy policy of its values, same policy certified" % tag,
                  cp.stderr.strip()[-300:])
        mc.run_sluice(binary, ["verify", model, out])
        # a policy-iteration checkpoint, resumed by value iteration
        tag = "%s: policy-iteration checkpoint resumed by value iteration" % obj
        ck = os.path.join(work, "pck_%s_mi1" % obj)
        out = os.path.join(work, "pck_%s_tovi.h5" % obj)
        cp = mc.run_sluice(binary, ["solve", model, "-o", out, "--checkpoint", ck, "--resume", "--tolerance", "1e-8"])
        s = mc.read_solution(out)
        chk.check("resumed at iteration 5" in cp.stderr and bool(s["converged"])
                  and s["method"] == ("gs-total" if obj == "total" else "rvi"),
                  "%s: goes on from its values and certifies" % tag, cp.stderr.strip()[-300:])
        mc.run_sluice(binary, ["verify", model, out])


def thin_then_dense(seed, n, objective):
    """Invented random model (no source): the first action of every state
    ends the trip at state 0 (a tiny system to factor), the second goes to
    25 random states (state 0 with probability >= 1/8) with larger rewards.
    Policy iteration evaluates the first-action policy cheaply, then every
    state switches and the second policy's factorization needs about ten
    times the memory (UMFPACK's estimates here: 0.06 MB, then 0.7 MB)."""
    rng = np.random.default_rng(seed)
    states = []
    for s in range(n):
        if s == 0 and objective == "total":
            states.append([(0, [(0, 1.0, 0.0)])])
            continue
        a0 = (0, [(0, 1.0, float(rng.uniform(-1, 0)))])
        tgt = rng.choice(np.arange(1, n), size=25, replace=False)
        p = dyadic_probs(rng, 26)
        q0 = 0.125 + 0.5 * p[0]
        rest = (1 - q0) * p[1:] / p[1:].sum()
        a1 = (1, [(0, float(q0), float(rng.uniform(0, 1)))] +
              [(int(j), float(x), float(rng.uniform(0, 1))) for j, x in zip(tgt, rest)])
        states.append([a0, a1])
    return states


def check_pi_midway_fallback(chk, binary, work):
    """The direct solve declined after one evaluation (--memory-limit
    between the first and second policy's UMFPACK estimates): the log says
    so and that (relative) value iteration goes on from the values of
    iteration 1; the method recorded is the fallback's; the answer is
    certified and equals the exact one: the HiGHS LP and scipy's sparse
    solve of the final policy (total; Bertsekas & Tsitsiklis 1991, recalled
    from memory), numpy policy iteration with dense exact solves and the
    dual LP (average; Puterman 1994, Sections 8.6 and 8.8, recalled from
    memory). 1 and 2 ranks."""
    for obj in ("total", "average"):
        mdp = float_states(thin_then_dense(81, 150, obj), 1.0)
        model = imp(binary, mdp, work, "mid_" + obj, obj)
        vi_words = "value iteration" if obj == "total" else "relative value iteration"
        for nranks in ((1, 2) if mc.mpiexec() else (1,)):
            tag = "%s pi, direct solve declined at iteration 2, %d rank(s)" % (obj, nranks)
            sol = os.path.join(work, "mid_%s_%d.h5" % (obj, nranks))
            rep = os.path.join(work, "mid_%s_%d.json" % (obj, nranks))
            cp = run_ranks(binary, nranks, ["solve", model, "-o", sol, "--method", "pi", "--tolerance", "1e-9",
                                            "--memory-limit", "200000", "--report", rep])
            s = mc.read_solution(sol)
            with open(rep) as f:
                r = json.load(f)
            want = ("factorization of iteration 2 needs about", "falling back to %s from the values of the policy "
                    "of iteration 1" % vi_words)
            chk.check(all(w in cp.stderr for w in want) and "solve: policy iteration 1:" in cp.stderr
                      and "solve: policy iteration 2:" not in cp.stderr,
                      "%s: the log shows one evaluation, then the fallback from its values" % tag,
                      cp.stderr.strip()[-400:])
            vi_method = "gs-total" if obj == "total" else "rvi"
            chk.check(s["method"] == vi_method and "iteration 2" in r.get("policy_iteration_fallback", ""),
                      "%s: method %s recorded, the reason in the report" % (tag, vi_method),
                      "%s / %r" % (s["method"], r.get("policy_iteration_fallback")))
            pairs, _ = mdp.pairs_of_policy(s["policy"])
            if obj == "total":
                lp = R.total_lp(mdp)
                vpi = R.total_policy_value(mdp, pairs)
                err = float(np.max(np.abs(s["value"] - lp)))
                dpi = float(np.max(np.abs(s["value"] - vpi)))
                ok = (err <= 1e-7 * (1 + np.max(np.abs(lp))) and dpi <= s["value_error_bound"] + 1e-12
                      and s["value_error_bound"] <= 1e-9)
                detail = "LP err %.3g, policy value diff %.3g, bound %.3g" % (err, dpi, s["value_error_bound"])
            else:
                g_lp, _ = R.average_dual_lp(mdp)
                g_np, _, _ = R.average_policy_iteration(mdp)
                ok = (s["gain_lower"] <= g_np + 1e-12 and g_np - 1e-12 <= s["gain_upper"]
                      and s["gain_upper"] - s["gain_lower"] <= 1e-9 and abs(s["gain"] - g_lp) <= 1e-7)
                detail = "gain %r in [%r, %r]; numpy %r, LP %r" % (s["gain"], s["gain_lower"], s["gain_upper"],
                                                                   g_np, g_lp)
            chk.check(ok and bool(s["converged"]), "%s: certified, the exact answer within the certificate" % tag,
                      detail)
            run_ranks(binary, nranks, ["verify", model, sol])


def main():
    # optional: OBJ_PARTS=finite,total,average,ranks (default: all)
    want = os.environ.get("OBJ_PARTS", "finite,total,average,pi,ranks").split(",")
    binary, work = mc.parse_args(sys.argv, "test_objectives.py SLUICE WORKDIR")
    chk = mc.Checker("test_objectives")
    parts = {"finite": check_finite, "total": check_total,
             "average": check_average, "ranks": check_ranks_and_resume,
             "pi": check_policy_iteration, "fallback": check_pi_fallback,
             "checkpoints": check_checkpoints, "generator": check_generator_terminal,
             "pi_checkpoints": check_pi_checkpoints, "pi_midway": check_pi_midway_fallback}
    for name in want:
        part = parts[name]
        try:
            part(chk, binary, work)
        except mc.SluiceError as e:
            chk.fail("%s: sluice run failed" % part.__name__, str(e))
    chk.finish()


if __name__ == "__main__":
    main()
