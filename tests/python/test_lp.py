#!/usr/bin/python3
"""test_lp.py - sluice solve versus the linear-programming formulation.

Outside source: the LP formulation of a discounted MDP (d'Epenoux 1960,
"Sur un probleme de production et de stockage dans l'aleatoire", Revue
Francaise de Recherche Operationnelle 14; Puterman 1994, "Markov Decision
Processes", Wiley, Section 6.9):

    minimise  sum_s v(s)
    s.t.      v(s) >= r(s,a) + g sum_j p(j|s,a) v(j)   for every pair (s,a),

whose unique optimum is v* (Puterman 1994, Theorem 6.9.1). It is solved with
scipy.optimize.linprog(method="highs"), which shares no code with sluice.

How the LP's own accuracy is allowed for: HiGHS stops at feasibility
tolerances, so its v_lp is only approximately v*. We do not trust it blindly:
we take the greedy policy of v_lp, evaluate it exactly (sparse direct solve),
and use that value v_ref as the reference, with the certified bound
    |v_ref - v*| <= sup|T v_ref - v_ref| / (1-g) + roundoff
(Puterman 1994, Proposition 6.2.1 / Theorem 6.3.1; roundoff as in
mdp_common.roundoff_allowance). A second, independent reference (exact
policy iteration in numpy) must agree with it within both bounds, and the
raw LP solution must agree within its residual bound too.

Checks for every method (gs, jacobi, mpi, pi) and every model:
  * exit code 0 and /converged = 1 at the requested --tolerance EPS;
  * sup|value - v*| <= EPS + ref_bound (the contract: value within EPS);
  * the policy, evaluated exactly in numpy, satisfies
    sup(v* - v_policy) <= EPS + ref_bound (eps-optimal greedy policy);
  * the certified bounds written are <= EPS and not below the true errors.
Also: `sluice import` stored exactly the generated model (read back with h5py).

usage: test_lp.py SLUICE_BINARY WORKDIR
"""

import os
import sys

import numpy as np
import scipy.sparse as sp
from scipy.optimize import linprog

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402


def solve_lp(mdp):
    """Solve the primal LP above with HiGHS; returns v_lp."""
    # constraint per pair k of state s:  g P_k v - v_s <= -r_k
    E = sp.csr_matrix((np.ones(mdp.n_pairs), mdp.state_of_pair,
                       np.arange(mdp.n_pairs + 1)), shape=(mdp.n_pairs, mdp.n))
    A = (mdp.gamma * mdp.P - E).tocsr()
    res = linprog(np.ones(mdp.n), A_ub=A, b_ub=-mdp.r,
                  bounds=[(None, None)] * mdp.n, method="highs",
                  options={"primal_feasibility_tolerance": 1e-10,
                           "dual_feasibility_tolerance": 1e-10})
    if res.status != 0:
        raise RuntimeError("linprog failed: %s" % res.message)
    return np.asarray(res.x, dtype=np.float64)


# (seed, n_states, gamma, actions, successors, local_width, tolerance EPS)
# Invented random models (no source); sizes up to a few hundred states.
# local_width=None: successors anywhere (mixes fast); a small local_width
# gives slowly mixing, chain-like models where the span of Tv - v shrinks
# slowly and Gauss-Seidel order matters.
CASES = [
    (11, 40, 0.5, (1, 3), (1, 3), None, 1e-8),
    (12, 150, 0.9, (1, 4), (1, 4), None, 1e-6),
    (13, 300, 0.99, (2, 5), (1, 4), None, 1e-5),
    (14, 250, 0.99, (1, 3), (2, 6), None, 1e-3),
    (15, 300, 0.99, (1, 4), (1, 3), 2, 1e-4),
]


def main():
    binary, work = mc.parse_args(sys.argv, "test_lp.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("test_lp")
    for seed, n, gamma, acts, succ, width, eps in CASES:
        label = "model seed=%d n=%d g=%g" % (seed, n, gamma)
        mdp = mc.random_mdp(seed, n, gamma, actions=acts, successors=succ,
                            local_width=width)

        # --- references, independent of sluice --------------------------------
        v_lp = solve_lp(mdp)
        _, lp_pairs, _ = mdp.bellman(v_lp)
        v_ref, _ = mdp.evaluate(lp_pairs)
        ref_bound = mdp.certified_error(v_ref)
        lp_bound = mdp.certified_error(v_lp)
        v_pi, _, pi_bound = mc.policy_iteration(mdp)
        chk.note("%s: %d pairs, LP raw error %.2e (bound %.2e), "
                 "reference bound %.2e"
                 % (label, mdp.n_pairs, np.max(np.abs(v_lp - v_ref)),
                    lp_bound, ref_bound))
        # sanity of the references themselves (LP vs numpy policy iteration)
        chk.check(ref_bound < 1e-3 * eps,
                  "%s: LP reference is certified far below EPS" % label,
                  "bound %.3g, EPS %.3g" % (ref_bound, eps))
        d = np.max(np.abs(v_ref - v_pi))
        chk.check(d <= ref_bound + pi_bound,
                  "%s: LP and policy-iteration references agree" % label,
                  "diff %.3g > %.3g" % (d, ref_bound + pi_bound))
        d = np.max(np.abs(v_lp - v_ref))
        chk.check(d <= lp_bound + ref_bound,
                  "%s: raw LP solution within its certified bound" % label,
                  "diff %.3g > %.3g" % (d, lp_bound + ref_bound))

        # --- sluice -------------------------------------------------------------
        tag = "lp_%d" % seed
        try:
            model = mc.import_model(binary, mdp, work, tag, shuffle_seed=seed)
            got = mc.read_model(model)
        except mc.SluiceError as e:
            chk.fail("%s: sluice import" % label, str(e))
            continue
        msgs = mc.compare_models(mdp, got)
        chk.check(not msgs, "%s: model file holds the generated model" % label,
                  "; ".join(msgs))

        for method in mc.METHODS:
            ml = "%s method=%s EPS=%g" % (label, method, eps)
            out = os.path.join(work, "%s_%s.h5" % (tag, method))
            try:
                mc.run_sluice(binary, ["solve", model, "-o", out,
                                       "--method", method,
                                       "--tolerance", repr(eps)])
                sol = mc.read_solution(out)
            except (mc.SluiceError, OSError, KeyError) as e:
                chk.fail("%s: sluice solve" % ml, str(e))
                continue
            mc.check_solution_shape(chk, sol, mdp, ml)
            chk.check(sol.get("converged") == 1, "%s: /converged = 1" % ml,
                      repr(sol.get("converged")))
            v = sol["value"]
            err = np.max(np.abs(v - v_ref))
            chk.check(err <= eps + ref_bound,
                      "%s: value within EPS of LP optimum" % ml,
                      "sup error %.3g > EPS %.3g + %.3g" % (err, eps, ref_bound))
            pairs, bad = mdp.pairs_of_policy(sol["policy"])
            if not chk.check(len(bad) == 0,
                             "%s: policy uses only available actions" % ml,
                             "%d states, first %s" % (len(bad), bad[:5])):
                continue
            v_pol, pol_bound = mdp.evaluate(pairs)
            loss = np.max(v_ref - v_pol)
            chk.check(loss <= eps + ref_bound + pol_bound,
                      "%s: policy is EPS-optimal (exact numpy evaluation)" % ml,
                      "loss %.3g > EPS %.3g" % (loss, eps))
            veb = float(sol.get("value_error_bound", np.inf))
            plb = float(sol.get("policy_loss_bound", np.inf))
            chk.check(veb <= eps, "%s: /value_error_bound <= EPS" % ml,
                      "%.3g" % veb)
            chk.check(plb <= eps, "%s: /policy_loss_bound <= EPS" % ml,
                      "%.3g" % plb)
            allow = ref_bound + mc.roundoff_allowance(mdp, v)
            chk.check(err <= veb + allow,
                      "%s: true value error <= /value_error_bound" % ml,
                      "%.3g > %.3g" % (err, veb))
            chk.check(loss <= plb + allow + pol_bound,
                      "%s: true policy loss <= /policy_loss_bound" % ml,
                      "%.3g > %.3g" % (loss, plb))
            chk.note("%s: %s iterations, value error %.2e, policy loss %.2e"
                     % (ml, sol.get("iterations"), err, max(loss, 0.0)))
    chk.finish()


if __name__ == "__main__":
    main()
