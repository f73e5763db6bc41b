#!/usr/bin/python3
"""test_certificate.py - the bounds sluice writes are honest.

The solution file claims, for its /value and /policy:
    sup_s |value(s) - v*(s)|      <= /value_error_bound
    sup_s  v*(s) - v_policy(s)    <= /policy_loss_bound
These follow from the Bellman-residual (MacQueen) bounds; Puterman 1994,
"Markov Decision Processes", Wiley, Section 6.6 (Theorem 6.6.3 and
Proposition 6.6.5) for value iteration, Section 6.3 for the contraction
bound. Here they are tested against the truth, not against the formulas:

  * v* comes from exact policy iteration written in numpy
    (mdp_common.policy_iteration; Howard 1960 / Puterman 1994 Section 6.4),
    certified by its own residual, |v_ref - v*| <= ref_bound;
  * v_policy is the exact value of sluice's policy (sparse direct solve);
  * sluice is run with loose tolerances (exit 0, /converged = 1, bounds must
    then also be <= the tolerance) and stopped early with --max-iterations
    (exit 75 expected, /converged = 0; the bounds must still hold).

Roundoff allowance added to each comparison: ref_bound (certified error of
the reference) + the exact-evaluation bound of v_policy + the backup
roundoff allowance of mdp_common.roundoff_allowance, which is
4 (m+2) eps (max|r| + g max|v|)/(1-g) for m successors per pair
(summation error bound, Higham 2002, "Accuracy and Stability of Numerical
Algorithms", Section 4.2; factor 4 common practice, no source). At g = 0.99
this is ~1e-11, far below any bound tested here (>= 1e-9 scale).

Models: invented random sparse MDPs (no source), fast- and slow-mixing.

usage: test_certificate.py SLUICE_BINARY WORKDIR
"""

import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

# (seed, n_states, gamma, actions, successors, local_width)
MODELS = [
    (31, 200, 0.5, (1, 4), (1, 4), None),
    (32, 300, 0.9, (2, 4), (1, 3), 3),
    (33, 300, 0.99, (1, 5), (1, 4), None),
    (34, 250, 0.99, (2, 3), (1, 2), 2),
]
LOOSE_TOLERANCES = (1e-1, 1e-2)
EARLY_STOPS = (1, 5)     # --max-iterations, with a tolerance not reachable
UNREACHABLE_TOL = 1e-9


def main():
    binary, work = mc.parse_args(sys.argv,
                                 "test_certificate.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("test_certificate")
    worst_ratio = 0.0
    for seed, n, gamma, acts, succ, width in MODELS:
        label = "model seed=%d n=%d g=%g" % (seed, n, gamma)
        mdp = mc.random_mdp(seed, n, gamma, actions=acts, successors=succ,
                            local_width=width)
        v_star, _, ref_bound = mc.policy_iteration(mdp)
        chk.check(ref_bound < 1e-9, "%s: reference v* certified" % label,
                  "bound %.3g" % ref_bound)
        tag = "cert_%d" % seed
        try:
            model = mc.import_model(binary, mdp, work, tag)
        except mc.SluiceError as e:
            chk.fail("%s: sluice import" % label, str(e))
            continue
        runs = [("tol=%g" % t, ["--tolerance", repr(t)], t, None)
                for t in LOOSE_TOLERANCES]
        runs += [("max-iterations=%d" % k,
                  ["--tolerance", repr(UNREACHABLE_TOL), "--max-iterations",
                   str(k)], UNREACHABLE_TOL, k) for k in EARLY_STOPS]
        for method in mc.METHODS:
            for rname, extra, tol, maxit in runs:
                rl = "%s method=%s %s" % (label, method, rname)
                out = os.path.join(work, "%s_%s_%s.h5"
                                   % (tag, method, rname.replace("=", "")))
                # early stop must give 75 for value iteration, and for every
                # method after a single iteration; mpi/pi may legitimately
                # finish within 5 iterations on these small models
                if maxit is None:
                    expect = (mc.EXIT_OK,)
                elif method in ("gs", "jacobi") or maxit == 1:
                    expect = (mc.EXIT_STOPPED,)
                else:
                    expect = (mc.EXIT_OK, mc.EXIT_STOPPED)
                try:
                    cp = mc.run_sluice(binary, ["solve", model, "-o", out,
                                                "--method", method] + extra,
                                       expect=expect)
                    sol = mc.read_solution(out)
                except (mc.SluiceError, OSError, KeyError) as e:
                    chk.fail("%s: sluice solve" % rl, str(e))
                    continue
                mc.check_solution_shape(chk, sol, mdp, rl)
                conv = sol.get("converged")
                want = 1 if cp.returncode == mc.EXIT_OK else 0
                chk.check(conv == want,
                          "%s: /converged = %d with exit %d"
                          % (rl, want, cp.returncode), repr(conv))
                if maxit is not None:
                    it = sol.get("iterations")
                    chk.check(it is not None and 1 <= it <= maxit,
                              "%s: 1 <= /iterations <= %d" % (rl, maxit),
                              repr(it))
                v = sol["value"]
                veb = float(sol.get("value_error_bound", math.nan))
                plb = float(sol.get("policy_loss_bound", math.nan))
                if not chk.check(veb >= 0 and plb >= 0 and math.isfinite(veb)
                                 and math.isfinite(plb),
                                 "%s: bounds finite and >= 0" % rl,
                                 "%r %r" % (veb, plb)):
                    continue
                if conv == 1:
                    chk.check(veb <= tol and plb <= tol,
                              "%s: converged bounds <= tolerance" % rl,
                              "%.3g %.3g > %.3g" % (veb, plb, tol))
                allow = ref_bound + mc.roundoff_allowance(mdp, v_star)
                err = np.max(np.abs(v - v_star))
                chk.check(err <= veb + allow,
                          "%s: sup|value - v*| <= /value_error_bound" % rl,
                          "true %.6g > claimed %.6g" % (err, veb))
                pairs, bad = mdp.pairs_of_policy(sol["policy"])
                if not chk.check(len(bad) == 0, "%s: policy uses available "
                                 "actions" % rl, "states %s" % bad[:5]):
                    continue
                v_pol, pol_bound = mdp.evaluate(pairs)
                loss = np.max(v_star - v_pol)
                chk.check(loss <= plb + allow + pol_bound,
                          "%s: v* - v_policy <= /policy_loss_bound" % rl,
                          "true %.6g > claimed %.6g" % (loss, plb))
                hist = sol.get("history")
                if chk.check(hist is not None and "value_error_bound" in hist,
                             "%s: /history present" % rl):
                    lens = {k: len(a) for k, a in hist.items()}
                    chk.check(len(set(lens.values())) == 1
                              and min(lens.values()) >= 1,
                              "%s: /history datasets have one equal, "
                              "non-zero length" % rl, "%s" % lens)
                if veb > 1e-9:      # ratios of roundoff-sized bounds mean nothing
                    worst_ratio = max(worst_ratio, err / veb)
                chk.note("%s: exit %d, it %s, value err %.3g <= %.3g, "
                         "policy loss %.3g <= %.3g"
                         % (rl, cp.returncode, sol.get("iterations"), err, veb,
                            max(loss, 0.0), plb))
    chk.note("largest (true value error / claimed bound): %.3f" % worst_ratio)
    chk.finish()


if __name__ == "__main__":
    main()
