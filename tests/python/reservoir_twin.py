"""reservoir_twin.py - independent re-implementation of the reservoir example.

Built from the equations in docs/reservoir.md, not from examples/reservoir.c
(this module never reads the C file). The scenario and all its numbers are
invented; see docs/reservoir.md.

Two implementations live here and check each other:

* state_pairs(params, s): plain Python floats, one state at a time, with an
  explicit merge of repeated successors (probabilities added, rewards
  probability-weighted), returning [(action, reward, [(target, prob), ...])];
* build_csr(params): numpy, all states at once, returning the arrays of the
  model-file layout (first_pair, action, reward, first_transition, target,
  probability) plus n_states and discount.

Both follow the operation order of docs/reservoir.md so that targets and
probabilities agree with a correct builder bit for bit: +, -, *, /, sqrt and
floor are exactly rounded under IEEE 754 in numpy and in C alike, and cos and
exp are taken from Python's math module, which calls the C library.

Run under /usr/bin/python3 (Debian numpy). `python3 reservoir_twin.py`
runs a self-check of the two implementations against each other.
"""

import math
import sys

import numpy as np

MONTHS = 12
TAU = 6.283185307179586  # 2*pi rounded to double (== math.tau)
MWH_PER_HM3_M = 2.725    # 1000 kg/m3 * 9.81 m/s2 * 1e6 m3 / 3.6e9 J/MWh

# name -> default, in the order of the parameter table of docs/reservoir.md
DEFAULTS = {
    "storage_levels": 60,
    "inflow_classes": 6,
    "release_levels": 11,
    "capacity": 1200.0,
    "max_release": 300.0,
    "mean_inflow": 140.0,
    "inflow_seasonality": 0.6,
    "inflow_cv": 0.45,
    "persistence": 0.6,
    "inflow_spread": 1.0,
    "inflow_band": 2,
    "evap_depth": 0.12,
    "surface_area": 45.0,
    "head_min": 40.0,
    "head_max": 95.0,
    "efficiency": 0.88,
    "price": 55.0,
    "price_seasonality": 0.3,
    "min_flow": 35.0,
    "shortfall_penalty": 20.0,
    "channel_capacity": 420.0,
    "flood_penalty": 60.0,
    "discount": 0.99,
}

INTEGER_PARAMS = ("storage_levels", "inflow_classes", "release_levels", "inflow_band")

MONTH_LABELS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]

# outcome quantities in the order and with the units of docs/reservoir.md
QUANTITIES = [("energy", "MWh"), ("revenue", "kCU"), ("release", "hm3"), ("spill", "hm3"),
              ("shortfall", "hm3"), ("inflow", "hm3"), ("evaporation", "hm3"), ("rounding", "hm3")]


def season(m, peak):
    return math.cos(TAU * (m - peak) / 12)


class Tables:
    """The per-level, per-action and per-(class, month) tables of the doc."""

    def __init__(self, params=None):
        p = dict(DEFAULTS)
        for k, v in (params or {}).items():
            if k not in p:
                raise KeyError("unknown reservoir parameter %r" % k)
            p[k] = float(v)
        for k in INTEGER_PARAMS:
            if float(p[k]) != math.floor(float(p[k])):
                raise ValueError("%s must be an integer" % k)
            p[k] = int(p[k])
        for k in p:
            if k not in INTEGER_PARAMS:
                p[k] = float(p[k])
        self.p = p
        L, J, N = p["storage_levels"], p["inflow_classes"], p["release_levels"]
        if L < 2 or J < 1 or N < 1 or p["inflow_band"] < 0:
            raise ValueError("need storage_levels >= 2, inflow_classes >= 1, "
                             "release_levels >= 1, inflow_band >= 0")
        self.L, self.J, self.N = L, J, N
        self.n_states = L * J * MONTHS
        self.discount = p["discount"]
        K = p["capacity"]
        self.K = K
        self.dS = K / (L - 1)
        self.S = [K * i / (L - 1) for i in range(L)]
        self.A = [p["surface_area"] * math.sqrt(s / K) for s in self.S]
        self.R = [p["max_release"] * a / (N - 1) if N > 1 else 0.0 for a in range(N)]
        b = p["inflow_band"]
        self.w = min(2 * b + 1, J)
        cv3 = math.sqrt(3.0) * p["inflow_cv"]
        self.Q = {}
        self.e = []
        self.pr = []
        self.next_lo = {}
        self.next_p = {}
        mid = (J - 1) / 2.0
        for m in range(MONTHS):
            mu = p["mean_inflow"] * (1 + p["inflow_seasonality"] * season(m, 4))
            self.e.append(p["evap_depth"] * (0.55 + 0.45 * season(m, 6)))
            self.pr.append(p["price"] * (1 + p["price_seasonality"] * season(m, 0)))
            rho = p["persistence"] * (0.75 + 0.25 * season(m, 1))
            for j in range(J):
                z = 2 * j / (J - 1) - 1 if J > 1 else 0.0
                self.Q[j, m] = mu * (1 + cv3 * z)
                c = rho * j + (1 - rho) * mid
                lo = math.floor(c + 0.5) - b
                lo = min(lo, J - self.w)
                lo = max(lo, 0)
                g = []
                for k in range(lo, lo + self.w):
                    u = (k - c) / p["inflow_spread"]
                    g.append(math.exp(-0.5 * u * u))
                G = 0.0
                for gk in g:
                    G += gk
                # drop classes whose weight underflowed to 0 at either end
                first, last = 0, len(g) - 1
                while g[first] == 0.0:
                    first += 1
                while g[last] == 0.0:
                    last -= 1
                self.next_lo[j, m] = lo + first
                self.next_p[j, m] = [gk / G for gk in g[first:last + 1]]

    def decode(self, s):
        i = s % self.L
        j = (s // self.L) % self.J
        m = s // (self.L * self.J)
        return i, j, m


def _pair_scalar(t, i, j, m, a):
    """(available, reward r, next storage level) of one pair, plain floats."""
    p = t.p
    K = t.K
    SQ = t.S[i] + t.Q[j, m]
    E = min(t.e[m] * t.A[i], SQ)
    W = SQ - E
    R = t.R[a]
    if not R <= W:
        return False, None, None
    x = W - R
    spill = x - K if x > K else 0.0
    S_end = min(x, K)
    i_next = min(math.floor(S_end / t.dS + 0.5), t.L - 1)
    Sbar = 0.5 * (t.S[i] + S_end)
    head = p["head_min"] + (p["head_max"] - p["head_min"]) * math.sqrt(Sbar / K)
    energy = (MWH_PER_HM3_M * p["efficiency"]) * head * R
    flow = R + spill
    shortfall = p["min_flow"] - flow if flow < p["min_flow"] else 0.0
    excess = flow - p["channel_capacity"] if flow > p["channel_capacity"] else 0.0
    r = (t.pr[m] * energy / 1000 - p["shortfall_penalty"] * shortfall
         - p["flood_penalty"] * excess)
    return True, r, i_next


def state_pairs(params_or_tables, s):
    """[(action, expected reward, [(target, probability), ...])] of state s,
    actions ascending, targets ascending and unique (after merging)."""
    t = params_or_tables if isinstance(params_or_tables, Tables) else Tables(params_or_tables)
    i, j, m = t.decode(s)
    out = []
    for a in range(t.N):
        ok, r, i_next = _pair_scalar(t, i, j, m, a)
        if not ok:
            continue
        m_next = (m + 1) % MONTHS
        emitted = [(i_next + t.L * (k + t.J * m_next), pk, r)
                   for k, pk in enumerate(t.next_p[j, m], start=t.next_lo[j, m])]
        # merge repeated successors in emission order (none occur in this
        # model, but the merge is part of what a builder does)
        prob = {}
        for tgt, pk, _ in emitted:
            prob[tgt] = prob.get(tgt, 0.0) + pk
        reward = 0.0
        for _, pk, rk in emitted:
            reward += pk * rk
        out.append((a, reward, sorted(prob.items())))
    return out


def model_lists(params=None):
    """state_pairs() of every state, in state order (small models only)."""
    t = Tables(params)
    return [state_pairs(t, s) for s in range(t.n_states)]


def build_csr(params=None):
    """The whole model in the model-file CSR layout (numpy arrays)."""
    t = Tables(params)
    p = t.p
    L, J, N, w = t.L, t.J, t.N, t.w
    cv3 = math.sqrt(3.0) * p["inflow_cv"]
    ns = t.n_states
    K = t.K
    s = np.arange(ns, dtype=np.int64)
    i = s % L
    j = (s // L) % J
    m = s // (L * J)
    S = np.array(t.S)
    A = np.array(t.A)
    Rv = np.array(t.R)
    Qtab = np.array([[t.Q[jj, mm] for jj in range(J)] for mm in range(MONTHS)])
    e = np.array(t.e)
    pr = np.array(t.pr)
    lo_tab = np.array([[t.next_lo[jj, mm] for jj in range(J)] for mm in range(MONTHS)],
                      dtype=np.int64)
    n_tab = np.array([[len(t.next_p[jj, mm]) for jj in range(J)] for mm in range(MONTHS)],
                     dtype=np.int64)
    p_tab = np.zeros((MONTHS, J, w))                 # padded with zeros beyond n_tab
    for mm in range(MONTHS):
        for jj in range(J):
            p_tab[mm, jj, :n_tab[mm, jj]] = t.next_p[jj, mm]

    SQ = S[i] + Qtab[m, j]
    E = np.minimum(e[m] * A[i], SQ)
    W = SQ - E
    avail = Rv[None, :] <= W[:, None]               # (ns, N), row-major = pair order
    ps, pa = np.nonzero(avail)
    counts = avail.sum(axis=1)
    first_pair = np.zeros(ns + 1, dtype=np.int64)
    np.cumsum(counts, out=first_pair[1:])
    del avail, counts

    pi, pj, pm = i[ps], j[ps], m[ps]
    R = Rv[pa]
    x = W[ps] - R
    spill = np.where(x > K, x - K, 0.0)
    S_end = np.minimum(x, K)
    i_next = np.minimum(np.floor(S_end / t.dS + 0.5).astype(np.int64), L - 1)
    Sbar = 0.5 * (S[pi] + S_end)
    head = p["head_min"] + (p["head_max"] - p["head_min"]) * np.sqrt(Sbar / K)
    energy = (MWH_PER_HM3_M * p["efficiency"]) * head * R
    flow = R + spill
    shortfall = np.where(flow < p["min_flow"], p["min_flow"] - flow, 0.0)
    excess = np.where(flow > p["channel_capacity"], flow - p["channel_capacity"], 0.0)
    r = pr[pm] * energy / 1000 - p["shortfall_penalty"] * shortfall \
        - p["flood_penalty"] * excess
    qval = {"energy": energy, "revenue": pr[pm] * energy / 1000, "release": R,
            "spill": spill, "shortfall": shortfall, "inflow": Qtab[pm, pj], "evaporation": E[ps],
            "rounding": S[i_next] - S_end}
    del x, spill, Sbar, head, energy, flow, shortfall, excess

    probs = p_tab[pm, pj]                            # (n_pairs, w), zero padded
    cnt = n_tab[pm, pj]
    reward = np.zeros(len(ps))
    for k in range(w):                               # padding adds 0 * r = 0
        reward += probs[:, k] * r
    # per pair: expected value of each quantity and the probability that it
    # is positive, summed over the successors in emission order
    quantities = {}
    for name, _ in QUANTITIES:
        q = qval[name]
        mean = np.zeros(len(ps))
        pos = np.zeros(len(ps))
        for k in range(w):
            mean += probs[:, k] * q
            pos += np.where(q > 0, probs[:, k], 0.0)
        quantities[name] = (mean, np.minimum(pos, 1.0))
    m_next = (pm + 1) % MONTHS
    base = i_next + L * (lo_tab[pm, pj] + J * m_next)
    keep = np.arange(w, dtype=np.int64)[None, :] < cnt[:, None]
    target = (base[:, None] + L * np.arange(w, dtype=np.int64)[None, :])[keep]
    probability = probs[keep]
    n_pairs = len(ps)
    first_transition = np.zeros(n_pairs + 1, dtype=np.int64)
    np.cumsum(cnt, out=first_transition[1:])
    return {
        "n_states": ns,
        "discount": t.discount,
        "first_pair": first_pair,
        "action": pa.astype(np.int32),
        "reward": reward,
        "first_transition": first_transition,
        "target": target,
        "probability": probability,
        # format 2 annotations (docs/reservoir.md, "Values, units and labels")
        "quantities": quantities,
        "quantity_units": dict(QUANTITIES),
        "factor_values": {"storage": (S, "hm3"),
                          "inflow": (np.array([p["mean_inflow"] * (1 + cv3 * (2 * jj / (J - 1) - 1 if J > 1 else 0.0))
                                               for jj in range(J)]), "hm3/month")},
        "factor_labels": {"month": MONTH_LABELS},
        "action_values": (Rv, "hm3/month"),
        "reward_unit": "kCU",
        "period_unit": "month",
    }


def _self_check(params=None, samples=400, seed=7):
    """Compare the scalar and the numpy implementation on sampled states."""
    t = Tables(params)
    csr = build_csr(params)
    rng = np.random.default_rng(seed)
    states = set(rng.integers(0, t.n_states, size=samples).tolist())
    states.update({0, t.n_states - 1, t.L - 1})
    fp, ft = csr["first_pair"], csr["first_transition"]
    for s in sorted(states):
        ref = state_pairs(t, s)
        ks = range(fp[s], fp[s + 1])
        if len(ref) != len(ks):
            return "state %d: %d pairs vs %d" % (s, len(ref), len(ks))
        for (a, rew, succ), k in zip(ref, ks):
            if a != csr["action"][k] or rew != csr["reward"][k]:
                return "state %d pair %d: action/reward differ" % (s, k)
            tg = csr["target"][ft[k]:ft[k + 1]].tolist()
            pb = csr["probability"][ft[k]:ft[k + 1]].tolist()
            if [x for x, _ in succ] != tg or [y for _, y in succ] != pb:
                return "state %d action %d: successors differ" % (s, a)
    return None


if __name__ == "__main__":
    bad = 0
    for prm in ({}, {"storage_levels": 37, "inflow_classes": 9, "release_levels": 7,
                     "inflow_band": 3, "persistence": 0.95, "capacity": 800},
                {"inflow_classes": 1, "release_levels": 1},
                {"inflow_classes": 3, "inflow_band": 4},
                {"storage_levels": 2, "inflow_classes": 20, "inflow_spread": 0.05,
                 "persistence": 1, "evap_depth": 3, "surface_area": 500}):
        msg = _self_check(prm)
        print("self-check", prm, "ok" if msg is None else "FAILED: " + msg)
        bad |= msg is not None
    sys.exit(1 if bad else 0)
