#!/usr/bin/python3
"""test_published.py - small MDPs with exact closed-form answers.

Each example is written as triplet CSV, run through `sluice import` and
`sluice solve` with every method, and compared with the exact value derived
in this script with rational arithmetic (fractions.Fraction), not with any
number sluice printed. The published numbers quoted below are given only as
a cross-check of the derivation; all of them are recalled from memory.

1. Puterman 1994, "Markov Decision Processes: Discrete Stochastic Dynamic
   Programming", Wiley, Section 3.1 (the two-state example of Fig. 3.1.1),
   recalled from memory: state s1 has a1,1 (reward 5; to s1 or s2 with
   probability 1/2 each) and a1,2 (reward 10; to s2); state s2 has a2,1
   (reward -1; stays). With discount 0.95 (Puterman's discounted worked
   examples, Chapter 6; recalled from memory: v*(s1) = -8.57, v*(s2) = -20,
   a1,1 optimal). We also use discount 0.5, where the optimal action in s1
   flips to a1,2 (derived below, not published).
2. Howard 1960, "Dynamic Programming and Markov Processes", MIT Press, the
   toymaker example (introduced in Chapter 1, discounted in Chapter 7;
   chapter numbers and numbers recalled from memory): per-transition
   rewards; with discount 0.9 the optimal policy is "advertise" in state 1
   and "research" in state 2 with values about 22.2 and 12.3.
3. Invented (no source): an exact tie between two actions in two states,
   built from dyadic numbers (discount 1/2, probabilities 1/2, rewards
   multiples of 1/4) so every quantity in the tie is exact in binary
   floating point. Checks: both tied actions are optimal (verified here in
   exact arithmetic), sluice's policy picks one of them, the value is right.
4. Invented (no source): a ring of N states, "advance" to the next state
   (reward 1 only when leaving the last one) or "stay" (small reward c).
   Closed form by the geometric series: with advance everywhere,
   v(s) = g^(N-1-s) / (1 - g^N); its optimality is verified below in exact
   arithmetic by the Bellman optimality equation (Puterman 1994, Theorem
   6.2.2). One long cycle: a slow case for value iteration.

usage: test_published.py SLUICE_BINARY WORKDIR
"""

import os
import sys
from fractions import Fraction as F

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402


# ----------------------------------------------------------------------------
# Exact arithmetic helpers (rationals)
# ----------------------------------------------------------------------------

def exact_policy_value(states, gamma, choice):
    """Exact value of a deterministic policy by Gaussian elimination over
    the rationals. states[s] = list of (action, [(j, p, reward)]) with p,
    reward, gamma as Fractions; choice[s] = index into states[s]."""
    n = len(states)
    A = [[F(0)] * n + [F(0)] for _ in range(n)]
    for s in range(n):
        _, trans = states[s][choice[s]]
        A[s][s] += 1
        for j, p, rw in trans:
            A[s][j] -= gamma * p
            A[s][n] += p * rw
    for c in range(n):
        piv = next(i for i in range(c, n) if A[i][c] != 0)
        A[c], A[piv] = A[piv], A[c]
        for i in range(n):
            if i != c and A[i][c] != 0:
                f = A[i][c] / A[c][c]
                A[i] = [a - f * b for a, b in zip(A[i], A[c])]
    return [A[s][n] / A[s][s] for s in range(n)]


def exact_q(states, gamma, v):
    """q[s][k] = sum_j p (reward + gamma v(j)) for the k-th action of s."""
    return [[sum(p * (rw + gamma * v[j]) for j, p, rw in trans)
             for _, trans in states[s]] for s in range(len(states))]


def exact_optimal_sets(states, gamma, v):
    """Check v satisfies the Bellman optimality equation exactly; return
    (ok, list per state of the action ids attaining the maximum)."""
    q = exact_q(states, gamma, v)
    ok = all(max(q[s]) == v[s] for s in range(len(states)))
    best = [[states[s][k][0] for k in range(len(q[s])) if q[s][k] == max(q[s])]
            for s in range(len(states))]
    return ok, best


def to_float_model(states, gamma):
    fl = [[(a, [(j, float(p), float(rw)) for j, p, rw in trans])
           for a, trans in st] for st in states]
    return mc.make_mdp(len(states), float(gamma), fl)


# ----------------------------------------------------------------------------
# The examples
# ----------------------------------------------------------------------------

def puterman_two_state(gamma):
    """Puterman 1994, Section 3.1 (recalled from memory); 0 = s1, 1 = s2;
    action ids 1 = a_{s,1}, 2 = a_{s,2}."""
    h = F(1, 2)
    return [
        [(1, [(0, h, F(5)), (1, h, F(5))]),
         (2, [(1, F(1), F(10))])],
        [(1, [(1, F(1), F(-1))])],
    ]


def puterman_closed_form(gamma):
    """Derived by hand: v(s2) = -1/(1-g); in s1, a1,1 gives
    (5 + g/2 v(s2)) / (1 - g/2) and a1,2 gives 10 + g v(s2)."""
    v2 = F(-1) / (1 - gamma)
    q11 = (5 + gamma / 2 * v2) / (1 - gamma / 2)
    q12 = 10 + gamma * v2
    return [max(q11, q12), v2], [[1] if q11 > q12 else [2] if q12 > q11
                                 else [1, 2], [1]]


def howard_toymaker():
    """Howard 1960, toymaker (recalled from memory). 0 = successful toy,
    1 = unsuccessful; action 1 = no advertising / no research,
    action 2 = advertising / research. Probabilities from decimal strings."""
    d = F
    return [
        [(1, [(0, d("0.5"), d(9)), (1, d("0.5"), d(3))]),
         (2, [(0, d("0.8"), d(4)), (1, d("0.2"), d(4))])],
        [(1, [(0, d("0.4"), d(3)), (1, d("0.6"), d(-7))]),
         (2, [(0, d("0.7"), d(1)), (1, d("0.3"), d(-19))])],
    ]


def dyadic_tie():
    """Invented (no source). Discount 1/2.
    state 0: action 3 -> 2 with reward 1            (q = 1)
             action 7 -> 1 or 2 w.p. 1/2, reward 0   (q = 1/4 v(1) = 1)
             action 5 -> 2 with reward 3/4           (q = 3/4, worse)
    state 1: action 0 -> 2 with reward 4            (v = 4)
    state 2: action 0 -> 2 with reward 0 (absorbing, v = 0)
    state 3: action 0 -> 0 (reward 2) or 1 (reward 0) w.p. 1/2
                 (q = 1 + 1/2 (1/2 + 2) = 9/4)
             action 1 -> 2 with reward 9/4           (q = 9/4)"""
    h = F(1, 2)
    return [
        [(3, [(2, F(1), F(1))]),
         (7, [(1, h, F(0)), (2, h, F(0))]),
         (5, [(2, F(1), F(3, 4))])],
        [(0, [(2, F(1), F(4))])],
        [(0, [(2, F(1), F(0))])],
        [(0, [(0, h, F(2)), (1, h, F(0))]),
         (1, [(2, F(1), F(9, 4))])],
    ]


def ring(n, c):
    """Invented (no source): action 0 advance, action 1 stay (reward c)."""
    return [[(0, [((s + 1) % n, F(1), F(1) if s == n - 1 else F(0))]),
             (1, [(s, F(1), c)])] for s in range(n)]


def ring_closed_form(n, gamma):
    """Geometric series: v(s) = g^(n-1-s) / (1 - g^n) under 'advance'."""
    return [gamma ** (n - 1 - s) / (1 - gamma ** n) for s in range(n)]


# ----------------------------------------------------------------------------

def run_example(chk, binary, work, tag, states, gamma, v_exact, opt_sets,
                eps):
    """Solve with every method; compare value and policy with the exact ones."""
    mdp = to_float_model(states, gamma)
    ok, best = exact_optimal_sets(states, gamma, v_exact)
    chk.check(ok, "%s: closed form satisfies the Bellman optimality equation "
              "exactly" % tag)
    chk.check(best == opt_sets, "%s: closed form's optimal actions as derived"
              % tag, "%s vs %s" % (best, opt_sets))
    v_ex = np.array([float(x) for x in v_exact])
    # The float model differs from the rational one only where a probability
    # is not dyadic (e.g. 0.8): each differs by <= u, so values by <= about
    # 4 u max|reward| / (1-g)^2 (perturbation bound; allowed with a factor
    # of 64, common practice, no source).
    rmax = float(max(abs(rw) for st in states for _, tr in st
                     for _, _, rw in tr))
    g = float(gamma)
    model_slack = 64 * mc.EPS_MACH * (rmax + 1) / (1 - g) ** 2
    try:
        model = mc.import_model(binary, mdp, work, tag)
    except mc.SluiceError as e:
        chk.fail("%s: sluice import" % tag, str(e))
        return
    msgs = mc.compare_models(mdp, mc.read_model(model))
    chk.check(not msgs, "%s: model file holds the example" % tag,
              "; ".join(msgs))
    for method in mc.METHODS:
        ml = "%s method=%s" % (tag, method)
        out = os.path.join(work, "%s_%s.h5" % (tag, method))
        try:
            mc.run_sluice(binary, ["solve", model, "-o", out, "--method",
                                   method, "--tolerance", repr(eps)])
            sol = mc.read_solution(out)
        except (mc.SluiceError, OSError, KeyError) as e:
            chk.fail("%s: sluice solve" % ml, str(e))
            continue
        mc.check_solution_shape(chk, sol, mdp, ml)
        v = sol["value"]
        if v.shape != v_ex.shape:
            continue
        err = np.max(np.abs(v - v_ex))
        allow = model_slack + mc.roundoff_allowance(mdp, v_ex)
        chk.check(err <= eps + allow, "%s: value equals closed form" % ml,
                  "sup error %.3g > EPS %.3g" % (err, eps))
        pol = [int(a) for a in sol["policy"]]
        wrong = [(s, pol[s], opt_sets[s]) for s in range(len(pol))
                 if pol[s] not in opt_sets[s]]
        chk.check(not wrong, "%s: policy picks an optimal action" % ml,
                  "state, picked, optimal: %s" % wrong[:5])
        chk.note("%s: value error %.2e, %s iterations" % (ml, err,
                                                         sol.get("iterations")))


def main():
    binary, work = mc.parse_args(sys.argv,
                                 "test_published.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("test_published")

    # 1. Puterman 1994, Section 3.1 example, discount 0.95 and 0.5.
    for gamma, tag in ((F(95, 100), "puterman_3_1_g095"),
                       (F(1, 2), "puterman_3_1_g05")):
        v, sets = puterman_closed_form(gamma)
        if gamma == F(95, 100):
            # cross-check of the derivation with the recalled published
            # numbers (recalled from memory): -8.57 and -20, a1,1 optimal
            chk.check(abs(float(v[0]) + 8.57) < 0.005 and v[1] == -20
                      and sets[0] == [1],
                      "%s: derivation matches the recalled published values"
                      % tag, "%s" % [float(x) for x in v])
        else:
            chk.check(sets[0] == [2], "%s: at discount 1/2, a1,2 is optimal"
                      % tag)
        run_example(chk, binary, work, tag, puterman_two_state(gamma), gamma,
                    v, sets, 1e-9)

    # 2. Howard 1960 toymaker, discount 0.9: exact values of all 4 policies.
    gamma = F(9, 10)
    states = howard_toymaker()
    vals = {}
    for c0 in range(2):
        for c1 in range(2):
            vals[(c0, c1)] = exact_policy_value(states, gamma, [c0, c1])
    best = [k for k, v in vals.items()
            if all(v[s] >= w[s] for w in vals.values() for s in range(2))]
    chk.check(len(best) == 1, "toymaker: one policy dominates all others",
              "%s" % best)
    v = vals[best[0]]
    sets = [[states[s][best[0][s]][0]] for s in range(2)]
    chk.check(best[0] == (1, 1) and abs(float(v[0]) - 22.2) < 0.05
              and abs(float(v[1]) - 12.3) < 0.05,
              "toymaker: derivation matches recalled published values",
              "%s %s" % (best, [float(x) for x in v]))
    run_example(chk, binary, work, "howard_toymaker_g09", states, gamma, v,
                sets, 1e-9)

    # 3. Invented dyadic tie.
    gamma = F(1, 2)
    states = dyadic_tie()
    v = [F(1), F(4), F(0), F(9, 4)]
    ok, sets = exact_optimal_sets(states, gamma, v)
    chk.check(sets == [[3, 7], [0], [0], [0, 1]],
              "tie: exact ties in states 0 and 3 as constructed", "%s" % sets)
    # the tie also holds exactly in double precision
    mdp = to_float_model(states, gamma)
    q = mdp.q_values(np.array([float(x) for x in v]))
    chk.check(q[0] == q[1] == 1.0 and q[2] < 1.0 and q[-2] == q[-1] == 2.25,
              "tie: tie is exact in floating point", "%s" % q)
    run_example(chk, binary, work, "invented_dyadic_tie", states, gamma, v,
                sets, 1e-12)

    # 4. Invented ring, N = 200, discount 0.99, stay reward 1/1000.
    n, gamma, c = 200, F(99, 100), F(1, 1000)
    states = ring(n, c)
    v = ring_closed_form(n, gamma)
    run_example(chk, binary, work, "invented_ring_200", states, gamma, v,
                [[0]] * n, 1e-8)
    chk.finish()


if __name__ == "__main__":
    main()
