#!/usr/bin/python3
"""test_evaluate.py - `sluice evaluate` versus scipy's sparse direct solver.

Outside source: the value of a fixed stationary policy pi of a discounted
MDP is the unique solution of (I - g P_pi) v = r_pi (Puterman 1994, "Markov
Decision Processes", Wiley, Theorem 6.1.1). The reference solves it with
scipy.sparse.linalg.spsolve (SuperLU), which shares no code with sluice's
UMFPACK or iterative paths. The reference's own error is certified by its
residual: |v - v_pi| <= sup|r_pi + g P_pi v - v| / (1-g) (same theorem,
the inverse has sup-norm 1/(1-g)), plus mdp_common.roundoff_allowance.

Models: invented random sparse MDPs with ~10^4 states (no source);
successors mostly within a window around the state with a few long jumps,
which keeps direct-solver fill-in small (a purely random graph of this size
fills in badly).

Policies evaluated: (a) a random policy written by this script into a copy
of a solution file that sluice wrote, (b) the policy sluice's own solve
returns. Checks for each, direct and --iterative:
  * exit code 0, /sluice_format "values", /method "direct"/"iterative";
  * direct: sup|v - v_spsolve| <= 1e-10 (1 + max|v|) + reference bound.
    1e-10 relative is common practice, no source: a backward-stable solve of
    a matrix with condition number <= (1+g)/(1-g) (= 199 at g = 0.99) should
    be accurate to ~1e-13 relative; the margin allows pivot growth;
  * iterative --tolerance EPS: sup|v - v_spsolve| <= EPS + reference bound
    and /error_bound <= EPS;
  * both: /error_bound is honest, i.e. the true error does not exceed it.
Also: a policy naming an action that a state does not have must be refused
with exit code 65 (bad data).

usage: test_evaluate.py SLUICE_BINARY WORKDIR
"""

import os
import shutil
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

# (seed, n_states, gamma, local_width, jump_fraction, iterative EPS)
CASES = [
    (21, 10000, 0.9, 20, 0.02, 1e-8),
    (22, 12000, 0.99, 8, 0.01, 1e-6),
]


def write_policy_file(template, path, policy):
    """Copy a sluice solution file and replace its /policy (same dtype)."""
    shutil.copyfile(template, path)
    with h5py.File(path, "r+") as f:
        dt = f["policy"].dtype
        del f["policy"]
        f.create_dataset("policy", data=np.asarray(policy).astype(dt))


def check_values(chk, label, vals, v_ref, ref_bound, mdp, pairs, tol_abs,
                 method):
    chk.check(vals.get("sluice_format") == "values",
              "%s: /sluice_format is 'values'" % label,
              repr(vals.get("sluice_format")))
    chk.check(vals.get("method") == method,
              "%s: /method is '%s'" % (label, method), repr(vals.get("method")))
    v = vals["value"]
    if not chk.check(v.shape == (mdp.n,), "%s: /value has n_states entries"
                     % label, str(v.shape)):
        return
    err = np.max(np.abs(v - v_ref))
    chk.check(err <= tol_abs + ref_bound,
              "%s: values agree with spsolve" % label,
              "sup diff %.3g > %.3g + %.3g" % (err, tol_abs, ref_bound))
    eb = float(vals.get("error_bound", np.inf))
    chk.check(np.isfinite(eb), "%s: /error_bound present and finite" % label)
    allow = ref_bound + mc.roundoff_allowance(mdp, v)
    chk.check(err <= eb + allow, "%s: true error <= /error_bound" % label,
              "%.3g > %.3g" % (err, eb))
    # independent a-posteriori bound on sluice's values, for the log
    Ppi, rpi = mdp.policy_system(pairs)
    post = np.max(np.abs(rpi + mdp.gamma * (Ppi @ v) - v)) / (1 - mdp.gamma)
    chk.note("%s: sup diff %.2e, /error_bound %.2e, residual bound %.2e"
             % (label, err, eb, post))
    return eb


def main():
    binary, work = mc.parse_args(sys.argv,
                                 "test_evaluate.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("test_evaluate")
    for seed, n, gamma, width, jump, eps in CASES:
        label = "model seed=%d n=%d g=%g" % (seed, n, gamma)
        mdp = mc.random_mdp(seed, n, gamma, actions=(1, 4), successors=(1, 4),
                            local_width=width, jump_fraction=jump)
        tag = "ev_%d" % seed
        try:
            model = mc.import_model(binary, mdp, work, tag)
        except mc.SluiceError as e:
            chk.fail("%s: sluice import" % label, str(e))
            continue
        chk.note("%s: %d pairs, %d transitions" % (label, mdp.n_pairs,
                                                  mdp.n_trans))
        # a solution file written by sluice, as template and as policy (b)
        sol_path = os.path.join(work, tag + "_sol.h5")
        try:
            mc.run_sluice(binary, ["solve", model, "-o", sol_path,
                                   "--tolerance", "1e-4"])
            sol = mc.read_solution(sol_path)
        except (mc.SluiceError, OSError, KeyError) as e:
            chk.fail("%s: sluice solve (needed for a policy file)" % label,
                     str(e))
            continue

        rng = np.random.default_rng(seed + 1000)
        pick = mdp.first_pair[:-1] + (rng.random(n) * np.diff(mdp.first_pair)
                                      ).astype(np.int64)
        random_pol = os.path.join(work, tag + "_random_policy.h5")
        write_policy_file(sol_path, random_pol, mdp.action[pick])
        policies = [("random policy", random_pol, pick)]
        own_pairs, bad = mdp.pairs_of_policy(sol["policy"])
        if chk.check(len(bad) == 0, "%s: solve's policy uses available "
                     "actions" % label):
            policies.append(("sluice's policy", sol_path, own_pairs))

        for pname, ppath, pairs in policies:
            v_ref, ref_bound = mdp.evaluate(pairs)
            for iterative in (False, True):
                method = "iterative" if iterative else "direct"
                pl = "%s, %s, %s" % (label, pname, method)
                out = os.path.join(work, "%s_%s_%s.h5"
                                   % (tag, pname.split()[0].strip("'"), method))
                args = ["evaluate", model, "--policy", ppath, "-o", out]
                if iterative:
                    args += ["--iterative", "--tolerance", repr(eps)]
                try:
                    mc.run_sluice(binary, args)
                    vals = mc.read_solution(out)
                except (mc.SluiceError, OSError, KeyError) as e:
                    chk.fail("%s: sluice evaluate" % pl, str(e))
                    continue
                if iterative:
                    eb = check_values(chk, pl, vals, v_ref, ref_bound, mdp,
                                      pairs, eps, method)
                    if eb is not None:
                        chk.check(eb <= eps, "%s: /error_bound <= EPS" % pl,
                                  "%.3g > %.3g" % (eb, eps))
                else:
                    tol = 1e-10 * (1.0 + np.max(np.abs(v_ref)))
                    check_values(chk, pl, vals, v_ref, ref_bound, mdp, pairs,
                                 tol, method)

        # a policy with an action id that state 0 does not have -> exit 65
        bad_act = mdp.action[pick].copy()
        bad_act[0] = 1 + np.max(mdp.action)     # ids are < action_pool
        bad_pol = os.path.join(work, tag + "_bad_policy.h5")
        write_policy_file(sol_path, bad_pol, bad_act)
        try:
            mc.run_sluice(binary, ["evaluate", model, "--policy", bad_pol,
                                   "-o", os.path.join(work, tag + "_bad.h5")],
                          expect=(mc.EXIT_DATAERR,))
            chk.check(True, "%s: unavailable action refused (65)" % label)
        except mc.SluiceError as e:
            chk.fail("%s: unavailable action refused with exit 65" % label,
                     str(e))
    chk.finish()


if __name__ == "__main__":
    main()
