"""objectives_ref.py - independent reference solutions for the finite-horizon,
total-reward and average-reward objectives, in numpy/scipy only.

Nothing here calls sluice or reuses its numbers. Models are mdp_common.Mdp
objects (pair-row layout, P as CSR n_pairs x n_states, pair rewards r).

Sources of the methods used as references:
  * finite horizon: backward induction, Puterman 1994, "Markov Decision
    Processes", Wiley, Section 4.5 (the algorithm; section number recalled
    from memory). Exact up to roundoff after H backups.
  * total reward with absorbing states: the value of a policy under which
    every state reaches absorption solves (I - P_TT) v = r_T on the
    transient states T; the optimal value is the optimum of the linear
    program  min sum_s v(s)  s.t.  v(s) >= r(s,a) + sum_j p(j|s,a) v(j),
    v = 0 on absorbing states (Bertsekas & Tsitsiklis 1991, "An analysis of
    stochastic shortest path problems", Math. Oper. Res. 16(3), 580-595;
    the LP form is the standard one for stochastic shortest paths, recalled
    from memory). Solved with scipy's HiGHS (linprog).
  * average reward, unichain: the dual LP of Puterman 1994, Section 8.8
    (recalled from memory):  max sum_{s,a} r(s,a) x(s,a)  s.t.
    sum_a x(j,a) - sum_{s,a} p(j|s,a) x(s,a) = 0 for all j,
    sum x = 1, x >= 0. Its optimum is the optimal gain g*. The primal
    (min g s.t. g + h(s) >= r(s,a) + sum_j p h(j)) gives a bias h.
    Both solved with HiGHS.
"""

from fractions import Fraction as F

import numpy as np
import scipy.optimize as opt
import scipy.sparse as sp


# ----------------------------------------------------------------------------
# finite horizon
# ----------------------------------------------------------------------------

def backward_induction(mdp, horizon, terminal=None):
    """Return (values [H+1][n], policy pairs [H][n]) with
    V_H = terminal (zeros if None) and V_t = max_a r + g P V_{t+1};
    the greedy pair is the first one attaining the maximum."""
    n = mdp.n
    V = np.zeros((horizon + 1, n))
    if terminal is not None:
        V[horizon] = terminal
    pol = np.zeros((horizon, n), dtype=np.int64)
    for t in range(horizon - 1, -1, -1):
        tv, greedy, _ = mdp.bellman(V[t + 1])
        V[t] = tv
        pol[t] = greedy
    return V, pol


def finite_policy_value(mdp, pairs_by_stage, terminal=None):
    """Value of a stage-dependent policy (pairs [H][n]) by backward recursion."""
    H = len(pairs_by_stage)
    v = np.zeros(mdp.n) if terminal is None else np.array(terminal, float)
    for t in range(H - 1, -1, -1):
        Ppi, rpi = mdp.policy_system(pairs_by_stage[t])
        v = rpi + mdp.gamma * (Ppi @ v)
    return v


# ----------------------------------------------------------------------------
# total reward to absorption
# ----------------------------------------------------------------------------

def absorbing_states(mdp):
    """States whose every action returns to the state with probability 1 and
    reward 0."""
    out = np.ones(mdp.n, dtype=bool)
    P = mdp.P
    for k in range(mdp.n_pairs):
        s = mdp.state_of_pair[k]
        row = P.getrow(k)
        if not (row.nnz == 1 and row.indices[0] == s and row.data[0] == 1.0
                and mdp.r[k] == 0.0):
            out[s] = False
    return out


def total_lp(mdp):
    """Optimal total reward by the LP above (HiGHS). Returns v."""
    A = absorbing_states(mdp)
    n = mdp.n
    # constraints: r_k + P_k v - v_s <= 0  ->  (P_k - e_s) v <= -r_k
    P = mdp.P.tocsr()
    E = sp.csr_matrix((np.ones(mdp.n_pairs), (np.arange(mdp.n_pairs),
                                              mdp.state_of_pair)),
                      shape=(mdp.n_pairs, n))
    keep = ~A[mdp.state_of_pair]
    Aub = (P - E)[keep]
    bub = -mdp.r[keep]
    bounds = [(0, 0) if A[s] else (None, None) for s in range(n)]
    res = opt.linprog(np.ones(n), A_ub=Aub, b_ub=bub, bounds=bounds,
                      method="highs")
    if res.status != 0:
        raise RuntimeError("total LP: " + res.message)
    return res.x


def total_policy_value(mdp, pairs):
    """Exact value of a policy that reaches absorption: sparse solve of
    (I - P_TT) v_T = r_T."""
    import scipy.sparse.linalg as sla
    A = absorbing_states(mdp)
    T = np.nonzero(~A)[0]
    Ppi, rpi = mdp.policy_system(pairs)
    M = (sp.identity(len(T), format="csc") - Ppi[T][:, T]).tocsc()
    v = np.zeros(mdp.n)
    v[T] = sla.spsolve(M, rpi[T])
    return v


def bold_play_exact(i, N, p):
    """Probability that bold play reaches N from fortune i (integers, N a
    power of 2, win probability p a Fraction), from the functional equation
    Q(x) = p Q(2x) for x <= 1/2, Q(x) = p + (1-p) Q(2x - 1) for x > 1/2,
    Q(0) = 0, Q(1) = 1 (Dubins & Savage 1965, "How to Gamble If You Must",
    Chapter 5; Billingsley 1995, "Probability and Measure", 3rd ed.,
    Section 7, which also proves bold play optimal for p <= 1/2; section
    numbers recalled from memory). Exact rational arithmetic."""
    x = F(i, N)
    if x == 0:
        return F(0)
    if x == 1:
        return F(1)
    if x <= F(1, 2):
        return p * bold_play_exact(int(2 * x * N), N, p)
    return p + (1 - p) * bold_play_exact(int((2 * x - 1) * N), N, p)


def gamblers_ruin_states(N, p):
    """Gambler's ruin with integer stakes as (action, [(j, prob, reward)])
    lists: fortune 0 and N absorb; in 0 < i < N stake k in 1..min(i, N-i)
    wins (to i+k) with probability p, reward 1 on reaching N."""
    states = []
    for i in range(N + 1):
        if i == 0 or i == N:
            states.append([(0, [(i, F(1), F(0))])])
            continue
        acts = []
        for k in range(1, min(i, N - i) + 1):
            acts.append((k, [(i + k, p, F(1) if i + k == N else F(0)),
                             (i - k, 1 - p, F(0))]))
        states.append(acts)
    return states


# ----------------------------------------------------------------------------
# average reward
# ----------------------------------------------------------------------------

def average_dual_lp(mdp):
    """Optimal gain of a unichain model from the dual LP (HiGHS).
    Returns (g*, x) with x the optimal state-action frequencies."""
    n, m = mdp.n, mdp.n_pairs
    P = mdp.P.tocsc()
    E = sp.csc_matrix((np.ones(m), (mdp.state_of_pair, np.arange(m))),
                      shape=(n, m))
    Aeq = sp.vstack([E - P.T, sp.csr_matrix(np.ones((1, m)))]).tocsr()
    beq = np.concatenate([np.zeros(n), [1.0]])
    res = opt.linprog(-mdp.r, A_eq=Aeq, b_eq=beq, bounds=(0, None),
                      method="highs")
    if res.status != 0:
        raise RuntimeError("average dual LP: " + res.message)
    return -res.fun, res.x


def average_primal_lp(mdp):
    """min g s.t. g + h(s) - sum_j p h(j) >= r(s,a), h(0) = 0. Returns (g, h)."""
    n, m = mdp.n, mdp.n_pairs
    P = mdp.P.tocsr()
    E = sp.csr_matrix((np.ones(m), (np.arange(m), mdp.state_of_pair)),
                      shape=(m, n))
    # -(g + (E - P) h) <= -r
    Aub = sp.hstack([-sp.csr_matrix(np.ones((m, 1))), -(E - P)]).tocsr()
    c = np.zeros(n + 1)
    c[0] = 1.0
    bounds = [(None, None)] + [(0, 0)] + [(None, None)] * (n - 1)
    res = opt.linprog(c, A_ub=Aub, b_ub=-mdp.r, bounds=bounds,
                      method="highs")
    if res.status != 0:
        raise RuntimeError("average primal LP: " + res.message)
    return res.x[0], res.x[1:]


def policy_gain(mdp, pairs):
    """Gain of a unichain policy: stationary distribution mu of P_pi
    (mu P = mu, sum mu = 1, least squares on the stacked system), g = mu r."""
    Ppi, rpi = mdp.policy_system(pairs)
    n = mdp.n
    A = np.vstack([(Ppi.toarray().T - np.eye(n)), np.ones((1, n))])
    b = np.concatenate([np.zeros(n), [1.0]])
    mu, *_ = np.linalg.lstsq(A, b, rcond=None)
    return float(mu @ rpi)


def exact_gain(states, choice):
    """Exact gain and bias (h(0) = 0) of a unichain policy over the
    rationals: solve g + h(s) = r(s) + sum_j p h(j). states as in
    gamblers_ruin_states; choice[s] indexes states[s]."""
    n = len(states)
    # unknowns: g, h(1..n-1)  (h(0) = 0)
    A = [[F(0)] * (n + 1) for _ in range(n)]
    for s in range(n):
        _, trans = states[s][choice[s]]
        A[s][0] = F(1)
        if s > 0:
            A[s][s] += 1
        for j, p, rw in trans:
            if j > 0:
                A[s][j] -= p
            A[s][n] += p * rw
    for c in range(n):
        piv = next(i for i in range(c, n) if A[i][c] != 0)
        A[c], A[piv] = A[piv], A[c]
        for i in range(n):
            if i != c and A[i][c] != 0:
                f = A[i][c] / A[c][c]
                A[i] = [a - f * b for a, b in zip(A[i], A[c])]
    x = [A[i][n] / A[i][i] for i in range(n)]
    return x[0], [F(0)] + x[1:]


def average_policy_iteration(mdp, pairs=None, max_iter=200):
    """Unichain policy iteration for gain and bias (Howard 1960; Puterman
    1994, Section 8.6, recalled from memory) with dense exact solves of
    g + h(s) - sum_j p h(j) = r(s), h(0) = 0. Keeps the current action
    unless another is better by more than a roundoff margin. Returns
    (g, h, pairs). Far more precise than an LP solved to HiGHS's default
    feasibility tolerance."""
    n = mdp.n
    pairs = mdp.first_pair[:-1].copy() if pairs is None else np.array(pairs)
    for _ in range(max_iter):
        Ppi, rpi = mdp.policy_system(pairs)
        A = np.eye(n) - Ppi.toarray()
        A[:, 0] = 1.0                  # column 0 carries g (h(0) = 0)
        x = np.linalg.solve(A, rpi)
        g, h = x[0], x.copy()
        h[0] = 0.0
        tv, greedy, q = mdp.bellman(h)
        margin = 1e-12 * (1.0 + np.max(np.abs(h)))
        improve = tv > q[pairs] + margin
        if not np.any(improve):
            return g, h, pairs
        pairs = np.where(improve, greedy, pairs)
    raise RuntimeError("average policy iteration did not terminate")
