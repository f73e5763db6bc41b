"""turbine_wear_twin.py - independent re-implementation of examples/turbine_wear.c.

Written from the rules in the header comment of examples/turbine_wear.c (this
module never reads the C code paths). The scenario and all its numbers are
invented.

* state_pairs(params, s): plain Python floats, one state at a time, with an
  explicit merge of repeated successors (probabilities added in emission
  order, rewards probability-weighted), returning
  [(action, reward, [(target, prob), ...])];
* build_csr(params): the arrays of the model-file layout, in the dict form of
  reservoir_twin.build_csr, so that crossread_model.compare() can use it;
* premises_of_control_limit(params): checks the premises of the theorem that
  test_examples.py relies on.

Run under /usr/bin/python3 (Debian numpy). `python3 turbine_wear_twin.py`
runs the self-check: entries worked out by hand, probability sums, and the
theorem's premises for several parameter sets.
"""

import math
import sys

import numpy as np

RUN, REPLACE = 0, 1

DEFAULTS = {
    "wear_levels": 30,
    "wear_rate": 0.4,
    "revenue": 100.0,
    "efficiency_loss": 0.5,
    "upkeep": 1.5,
    "replace_cost": 800.0,
    "discount": 0.98,
}


def params_of(params=None):
    """Defaults with overrides, checked like the generator's init()."""
    p = dict(DEFAULTS)
    for k, v in (params or {}).items():
        if k not in p:
            raise KeyError("unknown turbine_wear parameter %r" % k)
        p[k] = float(v)
    n = float(p["wear_levels"])
    if n != math.floor(n) or not 2 <= n <= 1e9:
        raise ValueError("wear_levels must be an integer in [2, 1e9]")
    p["wear_levels"] = int(n)
    if not 0.0 < p["wear_rate"] <= 1.0:
        raise ValueError("wear_rate must be in (0, 1]")
    if not 0.0 <= p["efficiency_loss"] <= 1.0:
        raise ValueError("efficiency_loss must be in [0, 1]")
    for k in ("revenue", "upkeep", "replace_cost"):
        if not 0.0 <= p[k] <= 1e12:
            raise ValueError("%s must be in [0, 1e12]" % k)
    if not 0.0 < p["discount"] <= 1.0:
        raise ValueError("discount must be in (0, 1]")
    return p


def _growth(p):
    """Probabilities of wear growing by 0, 1, 2 levels in a month of running."""
    w = p["wear_rate"]
    return (1.0 - w, 0.75 * w, 0.25 * w)


def _run_reward(p, i):
    top = p["wear_levels"] - 1
    return p["revenue"] * (1.0 - p["efficiency_loss"] * i / top) - p["upkeep"] * i


def state_pairs(params, s):
    """[(action, expected reward, [(target, probability), ...])] of state s,
    actions ascending, targets ascending and unique."""
    p = params_of(params)
    top = p["wear_levels"] - 1
    out = []
    if s < top:
        r = _run_reward(p, s)
        emitted = [(min(s + k, top), pk) for k, pk in enumerate(_growth(p)) if pk > 0.0]
        merged = {}
        for tgt, pk in emitted:
            merged[tgt] = merged.get(tgt, 0.0) + pk
        reward = 0.0
        for _, pk in emitted:
            reward += pk * r
        out.append((RUN, reward, sorted(merged.items())))
    out.append((REPLACE, -p["replace_cost"], [(0, 1.0)]))
    return out


def build_csr(params=None):
    """The whole model in the model-file CSR layout (numpy arrays), assembled
    from state_pairs() (the model is one-dimensional and small)."""
    p = params_of(params)
    n = p["wear_levels"]
    first_pair, action, reward, first_transition, target, probability = [0], [], [], [0], [], []
    for s in range(n):
        for a, r, succ in state_pairs(p, s):
            action.append(a)
            reward.append(r)
            target.extend(t for t, _ in succ)
            probability.extend(q for _, q in succ)
            first_transition.append(len(target))
        first_pair.append(len(action))
    return {
        "n_states": n,
        "discount": p["discount"],
        "first_pair": np.array(first_pair, dtype=np.int64),
        "action": np.array(action, dtype=np.int32),
        "reward": np.array(reward, dtype=np.float64),
        "first_transition": np.array(first_transition, dtype=np.int64),
        "target": np.array(target, dtype=np.int64),
        "probability": np.array(probability, dtype=np.float64),
    }


def premises_of_control_limit(params=None):
    """Messages for every premise of the control-limit theorem that fails.

    Theorem (C. Derman, "On optimal replacement rules when changes of state
    are Markovian", in R. Bellman (ed.), Mathematical Optimization
    Techniques, Univ. of California Press, 1963; also Puterman 1994,
    "Markov Decision Processes", Wiley, Section 6.11 -- both recalled from
    memory): if the reward of keeping is nonincreasing in the state, the
    keep-transition law is stochastically nondecreasing in the state (every
    tail sum P(j >= k | i) nondecreasing in i), and replacing has a reward
    and a transition law that do not depend on the state, then some optimal
    stationary policy replaces exactly in the states i >= i*.
    """
    csr = build_csr(params)
    n = csr["n_states"]
    fp, act, rew = csr["first_pair"], csr["action"], csr["reward"]
    ft, tg, pb = csr["first_transition"], csr["target"], csr["probability"]
    msgs = []
    run_r, tails = [], []
    rep = []
    for s in range(n):
        for k in range(fp[s], fp[s + 1]):
            dist = np.zeros(n)
            np.add.at(dist, tg[ft[k]:ft[k + 1]], pb[ft[k]:ft[k + 1]])
            if act[k] == RUN:
                run_r.append(rew[k])
                tails.append(np.cumsum(dist[::-1])[::-1])
            else:
                rep.append((rew[k], tuple(dist)))
    if any(b > a for a, b in zip(run_r, run_r[1:])):
        msgs.append("run reward increases with wear")
    for i in range(1, len(tails)):
        if (tails[i] < tails[i - 1] - 1e-15).any():
            msgs.append("run transition law is not stochastically increasing at wear %d" % i)
    if len(set(rep)) != 1:
        msgs.append("replace reward or law depends on the wear")
    return msgs


def _hand_checks():
    """Entries of the default model worked out by hand from the header rules
    of examples/turbine_wear.c (wear_levels 30, wear_rate 0.4)."""
    pairs0 = state_pairs(None, 0)
    pairs28 = state_pairs(None, 28)
    want28 = 100.0 * (1.0 - 0.5 * 28.0 / 29.0) - 1.5 * 28.0    # = 9.7241379...
    checks = [
        (pairs0[0][0] == RUN and abs(pairs0[0][1] - 100.0) < 1e-12, "state 0 run reward 100"),
        ([t for t, _ in pairs0[0][2]] == [0, 1, 2], "state 0 run -> 0, 1, 2"),
        (np.allclose([q for _, q in pairs0[0][2]], [0.6, 0.3, 0.1], rtol=0, atol=1e-15),
         "state 0 run probabilities 0.6, 0.3, 0.1"),
        (abs(pairs28[0][1] - want28) < 1e-12 and abs(want28 - 9.724137931) < 1e-9,
         "state 28 run reward 9.7241379"),
        ([t for t, _ in pairs28[0][2]] == [28, 29], "state 28 run -> 28, 29 (29 merged)"),
        (abs(pairs28[0][2][1][1] - 0.4) < 1e-15, "state 28 run -> 29 with probability 0.4"),
        (state_pairs(None, 29) == [(REPLACE, -800.0, [(0, 1.0)])],
         "state 29 (failed) can only be replaced"),
    ]
    bad = [what for ok, what in checks if not ok]
    return "hand check failed: " + ", ".join(bad) if bad else None


def _self_check(params=None):
    csr = build_csr(params)
    ft = csr["first_transition"]
    sums = np.add.reduceat(csr["probability"], ft[:-1])
    if np.abs(sums - 1.0).max() > 1e-15:
        return "probabilities do not sum to 1 (worst %.3g)" % np.abs(sums - 1.0).max()
    msgs = premises_of_control_limit(params)
    return "; ".join(msgs) if msgs else None


CASES = ({}, {"wear_levels": 2}, {"wear_levels": 12, "wear_rate": 1.0, "replace_cost": 100},
         {"wear_levels": 50, "wear_rate": 0.05, "upkeep": 0.0, "efficiency_loss": 0.0})

if __name__ == "__main__":
    msg = _hand_checks()
    print("hand checks", "ok" if msg is None else "FAILED: " + msg)
    bad = msg is not None
    for prm in CASES:
        msg = _self_check(prm)
        print("self-check", prm, "ok" if msg is None else "FAILED: " + msg)
        bad |= msg is not None
    sys.exit(1 if bad else 0)
