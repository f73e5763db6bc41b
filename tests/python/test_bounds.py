#!/usr/bin/python3
"""test_bounds.py - the bounds of `verify` and of `evaluate` against the truth.

`sluice verify MODEL SOLUTION --json` prints two bounds for the stored value
x and policy pi:
    value_error_bound >= sup_s |x(s) - v*(s)|
    policy_loss_bound >= sup_s  v*(s) - v_pi(s)
(MacQueen bounds; Puterman 1994, "Markov Decision Processes", Wiley,
Section 6.6, Theorem 6.6.3). `sluice evaluate` writes /error_bound >=
sup|x - v_pi| for the values it computes (Puterman 1994, Theorem 6.2.3:
the inverse of I - g P_pi has sup-norm 1/(1-g)).

Here each bound is compared with the true error, computed without sluice:
v* by exact policy iteration in numpy/scipy (mdp_common.policy_iteration),
v_pi by scipy's sparse LU; for the direct evaluation, whose error is a few
ulps, v_pi in extended precision (mdp_common.evaluate_precise). The files
checked are sluice's own (untampered: a converged solve, a solve stopped
after 2 iterations) and files this script writes (tampered): v* shifted by
a constant (the value bound must then be the shift itself, up to roundoff),
v* moved in one state, v* plus noise, the optimal policy with a worse
action in one state and in a tenth of the states.

Every check is an assertion with an allowance far below the bound it
checks (asserted too), so a bound made 100x too small fails here; the
value bound is also checked not to exceed (1+g)/(1-g) times the true error,
which holds for this formula since |Tx - x| <= (1+g)|x - v*| in every
state (triangle inequality and the contraction property, Puterman 1994,
Proposition 6.2.4), so a bound made needlessly loose fails too.

Models: invented random sparse MDPs (no source).

usage: test_bounds.py SLUICE_BINARY WORKDIR
"""

import json
import os
import shutil
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

# (seed, n_states, gamma, local_width): verify cases
VERIFY_MODELS = [
    (61, 300, 0.5, None),
    (62, 400, 0.9, 3),
]
# (seed, n_states, gamma, local_width): direct and iterative evaluation
EVALUATE_MODELS = [
    (71, 2000, 0.5, None),
    (72, 2000, 0.9, 5),
    (73, 3000, 0.99, 5),
]
HUGE_TOL = "1e6"     # verify exits 0 when both bounds are below it


def write_solution(template, path, value, policy):
    """Copy a solution file sluice wrote and replace /value and /policy."""
    shutil.copyfile(template, path)
    with h5py.File(path, "r+") as f:
        f["value"][...] = np.asarray(value, dtype=np.float64)
        f["policy"][...] = np.asarray(policy).astype(f["policy"].dtype)


def verify_json(binary, model, sol):
    cp = mc.run_sluice(binary, ["verify", model, sol, "--json", "--tolerance", HUGE_TOL])
    js = json.loads(cp.stdout)
    return float(js["value_error_bound"]), float(js["policy_loss_bound"]), js


def check_verify_model(chk, binary, work, seed, n, gamma, width):
    label = "verify, model seed=%d n=%d g=%g" % (seed, n, gamma)
    gen = mc.random_mdp(seed, n, gamma, actions=(2, 4), successors=(1, 4), local_width=width)
    try:
        model = mc.import_model(binary, gen, work, "vb_%d" % seed)
    except mc.SluiceError as e:
        chk.fail("%s: sluice import" % label, str(e))
        return
    mdp = mc.read_model(model)      # the numbers sluice reads, via h5py
    v_star, pairs_star, ref_bound = mc.policy_iteration(mdp)
    chk.check(ref_bound < 1e-10, "%s: reference v* certified" % label, "bound %.3g" % ref_bound)
    _, _, q = mdp.bellman(v_star)
    gap = v_star[mdp.state_of_pair] - q           # loss of each pair in one step, >= 0
    opt_actions = mdp.action[pairs_star]
    sol = os.path.join(work, "vb_%d_sol.h5" % seed)
    early = os.path.join(work, "vb_%d_early.h5" % seed)
    try:
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-6"])
        mc.run_sluice(binary, ["solve", model, "-o", early, "--tolerance", "1e-9", "--method", "gs",
                               "--max-iterations", "2"], expect=(mc.EXIT_STOPPED,))
    except mc.SluiceError as e:
        chk.fail("%s: sluice solve" % label, str(e))
        return

    rng = np.random.default_rng(seed)
    # the worst single-step action of a state with a choice, and a tenth of the states
    k_worst = int(np.argmax(gap))
    s_worst = int(mdp.state_of_pair[k_worst])
    one_bad = opt_actions.copy()
    one_bad[s_worst] = mdp.action[k_worst]
    some_bad = opt_actions.copy()
    for s in rng.choice(n, size=n // 10, replace=False):
        ks = np.arange(mdp.first_pair[s], mdp.first_pair[s + 1])
        some_bad[s] = mdp.action[ks[np.argmax(gap[ks])]]
    moved = v_star.copy()
    moved[s_worst] += 0.05
    cases = [
        ("sluice's converged solution", sol, None, None, False),
        ("sluice's solution after 2 iterations", early, None, None, False),
        ("v* + 0.01 in every state", None, v_star + 0.01, opt_actions, True),
        ("v* moved by 0.05 in state %d" % s_worst, None, moved, opt_actions, False),
        ("v* + uniform noise of 1e-3", None, v_star + rng.uniform(-1e-3, 1e-3, n), opt_actions, False),
        ("v*, worst action in state %d (one-step loss %.3g)" % (s_worst, gap[k_worst]), None, v_star,
         one_bad, False),
        ("v*, worst action in a tenth of the states", None, v_star, some_bad, False),
    ]
    f = gamma / (1.0 - gamma)
    for name, path, value, policy, shift in cases:
        cl = "%s: %s" % (label, name)
        if path is None:
            path = os.path.join(work, "vb_%d_case%d.h5" % (seed, len(os.listdir(work))))
            write_solution(sol, path, value, policy)
        try:
            veb, plb, js = verify_json(binary, model, path)
        except (mc.SluiceError, ValueError, KeyError) as e:
            chk.fail("%s: sluice verify --json" % cl, str(e))
            continue
        s = mc.read_solution(path)
        x, pol = s["value"], s["policy"]
        pairs, bad = mdp.pairs_of_policy(pol)
        if not chk.check(len(bad) == 0, "%s: policy uses available actions" % cl):
            continue
        v_pi, pi_bound = mdp.evaluate(pairs)
        err = float(np.max(np.abs(x - v_star)))
        loss = float(np.max(v_star - v_pi))
        allow = ref_bound + mc.roundoff_allowance(mdp, x)
        if err > 1e-9:      # cases that test the value bound (the others hold v* itself)
            chk.check(allow <= 0.01 * veb, "%s: allowance %.3g far below the value bound" % (cl, allow),
                      "value bound %.3g" % veb)
        chk.check(err <= veb + allow, "%s: sup|x - v*| <= verify's value bound" % cl,
                  "true %.6g > bound %.6g" % (err, veb))
        # not looser than the theorem allows: veb <= (1+g)/(1-g) (err + ref) + sluice's roundoff terms
        fp = 16 * mc.EPS_MACH * (np.max(np.abs(x)) + np.max(np.abs(mdp.r)))
        loose = (1 + gamma) / (1 - gamma) * (err + ref_bound) + (2 + 4 * f) * fp + allow
        chk.check(veb <= loose, "%s: value bound <= (1+g)/(1-g) x true error" % cl,
                  "bound %.6g > %.6g (true %.3g)" % (veb, loose, err))
        if shift:
            chk.check(abs(veb - 0.01) <= 1e-9, "%s: value bound equals the shift 0.01" % cl,
                      "bound %.12g" % veb)
        chk.check(loss <= plb + allow + pi_bound, "%s: v* - v_pi <= verify's policy-loss bound" % cl,
                  "true %.6g > bound %.6g" % (loss, plb))
        if loss > 1e-6:
            chk.check(allow + pi_bound <= 0.01 * plb,
                      "%s: allowance far below the policy-loss bound" % cl,
                      "%.3g vs %.3g" % (allow + pi_bound, plb))
        chk.note("%s: value err %.3g <= %.3g (x%.2f), policy loss %.3g <= %.3g (x%.2f)"
                 % (cl, err, veb, veb / err if err > 0 else np.inf, loss, plb,
                    plb / loss if loss > 0 else np.inf))
    # verify's exit code follows its bounds: the tampered value at a tolerance between true
    # error and 0 is refused with 65 and a named reason
    path = os.path.join(work, "vb_%d_refuse.h5" % seed)
    write_solution(sol, path, moved, opt_actions)
    try:
        cp = mc.run_sluice(binary, ["verify", model, path, "--tolerance", "0.01"], expect=(mc.EXIT_DATAERR,))
        chk.check("not certified" in cp.stderr and "vb_%d_refuse.h5" % seed in cp.stderr,
                  "%s: v* moved by 0.05 refused at tolerance 0.01 (exit 65, file named)" % label, cp.stderr)
    except mc.SluiceError as e:
        chk.fail("%s: v* moved by 0.05 refused at tolerance 0.01 with exit 65" % label, str(e))


def check_evaluate_model(chk, binary, work, seed, n, gamma, width):
    label = "evaluate, model seed=%d n=%d g=%g" % (seed, n, gamma)
    gen = mc.random_mdp(seed, n, gamma, actions=(1, 4), successors=(1, 4), local_width=width,
                        jump_fraction=0.02, reward_scale=10.0)
    try:
        model = mc.import_model(binary, gen, work, "eb_%d" % seed)
        sol = os.path.join(work, "eb_%d_sol.h5" % seed)
        mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-3"])
    except mc.SluiceError as e:
        chk.fail("%s: sluice import and solve" % label, str(e))
        return
    mdp = mc.read_model(model)
    rng = np.random.default_rng(seed)
    pick = mdp.first_pair[:-1] + (rng.random(n) * np.diff(mdp.first_pair)).astype(np.int64)
    rand_pol = os.path.join(work, "eb_%d_random.h5" % seed)
    write_solution(sol, rand_pol, mc.read_solution(sol)["value"], mdp.action[pick])
    for pname, ppath in (("sluice's policy", sol), ("a random policy", rand_pol)):
        pairs, bad = mdp.pairs_of_policy(mc.read_solution(ppath)["policy"])
        if not chk.check(len(bad) == 0, "%s, %s: policy uses available actions" % (label, pname)):
            continue
        v_ref, ref_bound = mdp.evaluate_precise(pairs)
        for mode, extra in (("direct", []), ("iterative", ["--iterative", "--tolerance", "1e-8"])):
            pl = "%s, %s, %s" % (label, pname, mode)
            out = os.path.join(work, "eb_%d_%s_%s.h5" % (seed, pname.split()[1].strip("'"), mode))
            try:
                mc.run_sluice(binary, ["evaluate", model, "--policy", ppath, "-o", out] + extra)
                vals = mc.read_solution(out)
            except (mc.SluiceError, OSError, KeyError) as e:
                chk.fail("%s: sluice evaluate" % pl, str(e))
                continue
            chk.check(vals.get("method") == mode, "%s: /method is %s" % (pl, mode), repr(vals.get("method")))
            eb = float(vals.get("error_bound", np.nan))
            err = float(np.max(np.abs(vals["value"].astype(np.longdouble) - v_ref)))
            chk.check(ref_bound <= 0.1 * eb, "%s: reference bound %.3g below a tenth of /error_bound"
                      % (pl, ref_bound), "/error_bound %.3g" % eb)
            chk.check(err <= eb + ref_bound, "%s: true error <= /error_bound" % pl,
                      "true %.6g > bound %.6g" % (err, eb))
            chk.note("%s: true error %.3g, /error_bound %.3g (x%.2f), reference bound %.2g"
                     % (pl, err, eb, eb / err if err > 0 else np.inf, ref_bound))


def main():
    binary, work = mc.parse_args(sys.argv, "test_bounds.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("test_bounds")
    for args in VERIFY_MODELS:
        check_verify_model(chk, binary, work, *args)
    for args in EVALUATE_MODELS:
        check_evaluate_model(chk, binary, work, *args)
    chk.finish()


if __name__ == "__main__":
    main()
