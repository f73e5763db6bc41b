#!/usr/bin/python3
"""test_examples.py - every example generator, built and solved by sluice,
against independent twins and exact optima computed here.

For each example of examples/ and a few parameter sets:

1. `sluice build` the generator; the model file must meet the file contract
   and match the example's twin pair by pair (crossread_model.check_contract
   and crossread_model.compare; twins in reservoir_twin.py,
   turbine_wear_twin.py and crossread_model.py). Building the same
   generator twice must give the same /fingerprint, and different
   parameters a different one. Under SLUICE_LAUNCH (e.g. "mpirun -np 3
   --oversubscribe") the model built by N ranks must equal, array for array,
   the one built by a single process.
2. The optimum v* of the twin model by exact policy iteration in scipy
   (mdp_common.policy_iteration; Howard 1960, "Dynamic Programming and
   Markov Processes", MIT Press; Puterman 1994, "Markov Decision Processes",
   Wiley, Section 6.4 -- section recalled from memory), with its certified
   error bound. Where the example documents a closed form, v* must match it:
   two_state.c and tie.c derive theirs in their header comments.
3. `sluice solve --tolerance EPS` with every method: the --tolerance contract
   (DESIGN.md) says /value is within EPS of v* and /policy is within EPS of
   optimal in every state. Both are checked against v* and the exact value
   of the returned policy (scipy spsolve), allowing the reference's own
   certified error. Also the solution-file contract (format, fingerprint,
   converged, dtypes).
4. `sluice verify` accepts the solution (exit 0) and rejects (exit 65) a copy
   whose value is moved by 1000 EPS in one state, and a copy whose policy
   takes, in one state, an action that loses more than 1000 EPS.
5. turbine_wear: the model meets the premises of the control-limit theorem
   (C. Derman, "On optimal replacement rules when changes of state are
   Markovian", in R. Bellman (ed.), Mathematical Optimization Techniques,
   Univ. of California Press, 1963 -- recalled from memory), so the exact
   optimal policy must replace exactly from some wear level on; and where
   every other action loses more than the tolerance allows, sluice's policy
   must be that very policy.

The example data is invented. Results support, never replace, licensed
engineering judgement and local regulations.

usage: test_examples.py SLUICE_BINARY WORKDIR
environment: SLUICE_LAUNCH (launch prefix), SLUICE_TEST_METHODS (comma list,
default gs,jacobi,mpi,pi; empty: check the built models only). Run under /usr/bin/python3 (Debian numpy, scipy,
h5py).
"""

import json
import os
import shutil
import subprocess
import sys

import h5py
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import crossread_model as cm  # noqa: E402
import mdp_common as mc  # noqa: E402
import turbine_wear_twin as tw  # noqa: E402

EXAMPLES_DIR = os.path.normpath(os.path.join(HERE, "..", "..", "examples"))

TWINS = dict(cm.TWINS)
TWINS["turbine_wear"] = tw.build_csr

# (example, parameters, tolerance). The second reservoir case is small and
# discounts harder, so that a different pattern of available actions and a
# narrower inflow band are exercised. Reservoir values are ~2e5 kCU, so 1e-4
# is a relative accuracy of ~5e-10: strict, yet well above the roundoff of a
# backup (~1e-10 absolute there).
CASES = [
    ("reservoir", {}, 1e-4),
    ("reservoir", {"storage_levels": 25, "inflow_classes": 3, "release_levels": 6,
                   "inflow_band": 1, "discount": 0.95}, 1e-4),
    ("turbine_wear", {}, 1e-6),
    ("turbine_wear", {"wear_levels": 12, "wear_rate": 1.0, "replace_cost": 100}, 1e-6),
    ("two_state", {}, 1e-9),
    ("two_state", {"discount": 0.5}, 1e-9),
    ("tie", {}, 1e-9),
]


def closed_form(name, params):
    """v* where the example's header derives it, else None."""
    if name == "two_state":
        g = float(params.get("discount", 0.95))
        q0 = (5.0 - g / (2.0 * (1.0 - g))) / (1.0 - g / 2.0)
        q1 = 10.0 - g / (1.0 - g)
        return np.array([max(q0, q1), -1.0 / (1.0 - g)])
    if name == "tie":
        g = float(params.get("discount", 0.5))
        return np.array([max(0.5 + g, 0.75 + g / 2.0), 1.0, 0.0])
    return None


def mdp_of(csr):
    return mc.Mdp(csr["n_states"], csr["discount"], csr["first_pair"], csr["action"],
                  csr["first_transition"], csr["target"], csr["probability"],
                  r=csr["reward"])


def build_args(name, params, out):
    args = ["build", os.path.join(EXAMPLES_DIR, name + ".c"), "-o", out]
    for k, v in params.items():
        args += ["--param", "%s=%r" % (k, v)]
    return args


def run_plain(binary, args):
    """Run sluice as one process, without SLUICE_LAUNCH."""
    return subprocess.run([binary] + args, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                          text=True, timeout=300)


ARRAYS = ("first_pair", "action", "reward", "first_transition", "target", "probability")


def fingerprint_of(path):
    with h5py.File(path, "r") as f:
        return cm._attr_str(f.attrs.get("fingerprint"))


def tamper(src, dst, value=None, policy=None):
    """Copy a solution file, then overwrite (state, new) in /value or /policy."""
    shutil.copyfile(src, dst)
    with h5py.File(dst, "r+") as f:
        if value is not None:
            f["value"][value[0]] = value[1]
        if policy is not None:
            f["policy"][policy[0]] = policy[1]


def check_case(chk, binary, work, case_no, name, params, tol, methods, fingerprints):
    label = "%s %s" % (name, params or "defaults")
    stem = os.path.join(work, "%s-%d" % (name, case_no))
    model = stem + ".h5"
    try:
        mc.run_sluice(binary, build_args(name, params, model))
    except mc.SluiceError as e:
        chk.fail("%s: sluice build" % label, str(e))
        return
    twin = TWINS[name](params)
    try:
        m = cm.read_model(model)
        cm.check_contract(m, 1e-12)
        cm.compare(m, twin, name, params)
        cm.compare_annotations(m, twin, name, params)
        chk.check(True, "%s: model file matches the twin" % label)
    except cm.Mismatch as e:
        chk.fail("%s: model file matches the twin" % label, str(e))
        return
    fingerprint = fingerprint_of(model)
    fingerprints.setdefault(name, {})[case_no] = fingerprint

    # determinism, and a one-process build equal to the launched one
    again = stem + "-again.h5"
    cp = run_plain(binary, build_args(name, params, again))
    if chk.check(cp.returncode == 0, "%s: one-process build" % label, cp.stderr.strip()[-500:]):
        m2 = cm.read_model(again)
        differ = [k for k in ARRAYS if not np.array_equal(m[k], m2[k])]
        chk.check(not differ,
                  "%s: model built %s equals the one-process build"
                  % (label, "under SLUICE_LAUNCH" if mc.launcher() else "twice"),
                  "differs in %s" % differ)
        chk.check(fingerprint == fingerprint_of(again),
                  "%s: same model, same fingerprint" % label,
                  "%r vs %r" % (fingerprint, fingerprint_of(again)))

    mdp = mdp_of(twin)
    v_star, pairs_star, ref_bound = mc.policy_iteration(mdp)
    _, _, q_star = mdp.bellman(v_star)
    gap = v_star[mdp.state_of_pair] - q_star          # loss of each action, >= 0
    exact = closed_form(name, params)
    if exact is not None:
        err = float(np.max(np.abs(v_star - exact)))
        chk.check(err <= 1e-12 * (1.0 + np.max(np.abs(exact))) + ref_bound,
                  "%s: twin optimum equals the closed form in the example header" % label,
                  "max error %.3g" % err)
    if name == "turbine_wear":
        premises = tw.premises_of_control_limit(params)
        chk.check(not premises, "%s: premises of the control-limit theorem" % label,
                  "; ".join(premises))
        best_actions = mdp.action[pairs_star]
        chk.check(is_control_limit(best_actions),
                  "%s: the exact optimal policy is a control-limit policy" % label,
                  "actions %s" % best_actions.tolist())
    chk.note("%s: %d states, %d pairs, %d transitions; twin v* in [%.6g, %.6g], "
             "reference bound %.2g" % (label, mdp.n, mdp.n_pairs, mdp.n_trans,
                                       v_star.min(), v_star.max(), ref_bound))

    for method in methods:
        sol = "%s-%s.sol.h5" % (stem, method)
        mlabel = "%s, method %s" % (label, method)
        try:
            mc.run_sluice(binary, ["solve", model, "-o", sol, "--method", method,
                                   "--tolerance", repr(tol)])
        except mc.SluiceError as e:
            chk.fail("%s: sluice solve" % mlabel, str(e))
            continue
        check_solution(chk, binary, mlabel, model, sol, fingerprint, mdp, v_star,
                       ref_bound, gap, pairs_star, tol, name)
    if "mpi" in methods:
        # --sweeps M: exactly M evaluation sweeps per iteration (one check
        # sweep each, one more for the last check), whatever the model; below
        # 8 no trial of Jacobi sweeps completes, so they stay Gauss-Seidel
        for sweeps in (3, 8):
            sol = "%s-mpi-m%d.sol.h5" % (stem, sweeps)
            rep = "%s-mpi-m%d.json" % (stem, sweeps)
            mlabel = "%s, method mpi --sweeps %d" % (label, sweeps)
            try:
                mc.run_sluice(binary, ["solve", model, "-o", sol, "--method", "mpi", "--sweeps", str(sweeps),
                                       "--tolerance", repr(tol), "--report", rep])
            except mc.SluiceError as e:
                chk.fail("%s: sluice solve" % mlabel, str(e))
                continue
            with open(rep) as f:
                r = json.load(f)
            chk.check(r["sweeps"] == r["iterations"] * (sweeps + 1) + 1,
                      "%s: %d evaluation sweeps per iteration" % (mlabel, sweeps),
                      "%d sweeps in %d iterations" % (r["sweeps"], r["iterations"]))
            kinds = ("gauss-seidel",) if sweeps < 8 else ("gauss-seidel", "jacobi")
            chk.check(r.get("evaluation") in kinds, "%s: evaluation sweeps %s" % (mlabel, " or ".join(kinds)),
                      "report says %r" % r.get("evaluation"))
            check_solution(chk, binary, mlabel, model, sol, fingerprint, mdp, v_star,
                           ref_bound, gap, pairs_star, tol, name)


def is_control_limit(actions, replace=tw.REPLACE):
    rep = np.asarray(actions) == replace
    first = int(np.argmax(rep)) if rep.any() else len(rep)
    return bool(rep[first:].all())


def check_solution(chk, binary, label, model, sol, fingerprint, mdp, v_star, ref_bound,
                   gap, pairs_star, tol, name):
    with h5py.File(sol, "r") as f:
        vdtype = f["value"].dtype if "value" in f else None
        pdtype = f["policy"].dtype if "policy" in f else None
    if not chk.check(vdtype == np.float64 and pdtype == np.int32,
                     "%s: /value float64 and /policy int32" % label, "%s, %s" % (vdtype, pdtype)):
        return
    s = mc.read_solution(sol)
    chk.check(s.get("sluice_format") == "solution",
              "%s: /sluice_format is 'solution'" % label, repr(s.get("sluice_format")))
    for k in ("method", "converged", "iterations", "residual_sup", "residual_span"):
        chk.check(k in s, "%s: attribute /%s present" % (label, k))
    chk.check(s.get("model_fingerprint") == fingerprint,
              "%s: /model_fingerprint is the model's" % label,
              "%r vs %r" % (s.get("model_fingerprint"), fingerprint))
    conv = s.get("converged")
    chk.check(conv in ("true", "yes") if isinstance(conv, str) else bool(np.all(conv)),
              "%s: /converged is true" % label, repr(conv))
    value, policy = s["value"], s["policy"]
    if not chk.check(value.shape == (mdp.n,) and policy.shape == (mdp.n,),
                     "%s: /value and /policy have n_states entries" % label):
        return
    pairs, bad = mdp.pairs_of_policy(policy)
    if not chk.check(len(bad) == 0, "%s: every policy action is available" % label,
                     "first bad state %s" % (bad[:1].tolist())):
        return

    err = np.abs(value - v_star)
    worst = int(np.argmax(err))
    chk.check(err[worst] <= tol + ref_bound,
              "%s: /value within the tolerance of v*" % label,
              "error %.3g at state %d, tolerance %.3g, reference bound %.2g"
              % (err[worst], worst, tol, ref_bound))
    v_pi, pi_bound = mdp.evaluate(pairs)
    loss = v_star - v_pi
    worst = int(np.argmax(loss))
    chk.check(loss[worst] <= tol + ref_bound + pi_bound,
              "%s: /policy within the tolerance of optimal" % label,
              "loses %.3g at state %d (action %d), tolerance %.3g"
              % (loss[worst], worst, policy[worst], tol))
    if name == "turbine_wear":
        # every state whose other action loses more than the tolerance must
        # take the optimal action (v* - v_pi >= that loss), so if all do, the
        # policy is the optimal control-limit policy itself
        others = np.ones(mdp.n_pairs, dtype=bool)
        others[pairs_star] = False
        margin = tol + ref_bound + pi_bound
        if not others.any() or gap[others].min() > margin:
            chk.check(np.array_equal(pairs, pairs_star) and is_control_limit(policy),
                      "%s: sluice's policy is the optimal control-limit policy" % label,
                      "policy %s" % policy.tolist())
        else:
            chk.note("%s: an action loses only %.3g, control-limit check of sluice's "
                     "policy skipped" % (label, gap[others].min()))

    try:
        mc.run_sluice(binary, ["verify", model, sol, "--tolerance", repr(tol)])
        chk.check(True, "%s: sluice verify accepts the solution" % label)
    except mc.SluiceError as e:
        chk.fail("%s: sluice verify accepts the solution" % label, str(e))
    bad_value = sol + ".bad-value.h5"
    s0 = int(np.argmax(np.abs(v_star)))
    tamper(sol, bad_value, value=(s0, value[s0] + 1000.0 * tol))
    try:
        mc.run_sluice(binary, ["verify", model, bad_value, "--tolerance", repr(tol)],
                      expect=(mc.EXIT_DATAERR,))
        chk.check(True, "%s: verify rejects a value moved by 1000 EPS (exit 65)" % label)
    except mc.SluiceError as e:
        chk.fail("%s: verify rejects a value moved by 1000 EPS (exit 65)" % label, str(e))
    k = int(np.argmax(gap))
    if gap[k] > 1000.0 * tol:
        s1 = int(mdp.state_of_pair[k])
        bad_policy = sol + ".bad-policy.h5"
        tamper(sol, bad_policy, policy=(s1, int(mdp.action[k])))
        try:
            mc.run_sluice(binary, ["verify", model, bad_policy, "--tolerance", repr(tol)],
                          expect=(mc.EXIT_DATAERR,))
            chk.check(True, "%s: verify rejects a policy that loses %.3g in state %d (exit 65)"
                      % (label, gap[k], s1))
        except mc.SluiceError as e:
            chk.fail("%s: verify rejects a policy that loses %.3g in state %d (exit 65)"
                     % (label, gap[k], s1), str(e))


def main():
    binary, work = mc.parse_args(sys.argv, "test_examples.py SLUICE_BINARY WORKDIR")
    os.environ["SLUICE_CACHE"] = os.path.join(work, "cache")
    methods = [m for m in os.environ.get("SLUICE_TEST_METHODS", ",".join(mc.METHODS)).split(",")
               if m]   # empty: models only
    chk = mc.Checker("test_examples")
    if mc.launcher():
        chk.note("launch prefix: %s" % " ".join(mc.launcher()))
    # the turbine-wear twin is the reference for the model sluice builds:
    # its entries worked out by hand and its self-consistency come first
    # (a wrong twin would make the comparisons below meaningless)
    msg = tw._hand_checks()
    chk.check(msg is None, "turbine_wear twin: entries worked out by hand", msg or "")
    for prm in tw.CASES:
        msg = tw._self_check(prm)
        chk.check(msg is None, "turbine_wear twin: self-check %s" % (prm or "defaults"), msg or "")
    fingerprints = {}
    for case_no, (name, params, tol) in enumerate(CASES):
        check_case(chk, binary, work, case_no, name, params, tol, methods, fingerprints)
    for name, by_case in fingerprints.items():
        if len(by_case) > 1:
            chk.check(len(set(by_case.values())) == len(by_case),
                      "%s: different parameters give different fingerprints" % name,
                      repr(by_case))
    chk.finish()


if __name__ == "__main__":
    main()
