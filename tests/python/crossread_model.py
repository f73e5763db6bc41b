#!/usr/bin/python3
"""crossread_model.py - read a built model file independently and compare it
with an independent twin of its generator.

usage: crossread_model.py MODEL.h5 [--param NAME=VALUE ...]
                          [--generator reservoir|two_state|tie]
                          [--sum-tolerance T] [--quiet]

The file is read with h5py only (no sluice code). Two kinds of checks:

1. The model-file contract of docs (DESIGN: "Model file"): attributes
   sluice_format == "model", format_version 1 or 2, fingerprint, n_states,
   n_pairs, n_transitions, discount; dataset dtypes and sizes; pointer
   arrays that start at 0, end at the counts and never decrease; at least one
   pair per state and one transition per pair; action ids ascending and
   unique within a state; targets in [0, n_states), ascending and unique
   within a pair; probabilities in (0, 1] summing to 1 within
   --sum-tolerance (default 1e-12, the accuracy the examples promise);
   finite rewards.
2. Every pair against the twin built for the same parameters
   (tests/python/reservoir_twin.py for the reservoir, small hand-written
   twins below for two_state and tie): the pair layout, action ids, targets
   and probabilities must be identical, bit for bit; rewards must agree
   within a relative 1e-12, because the file's reward is a sum over
   successors whose summation order (and any fused multiply-add) the file
   contract leaves to the builder. The discount must be identical.
3. Format 2 (docs/formats.md): units, factor values and labels and action
   values identical to the twin's; every outcome quantity's per-pair mean
   within the reward's relative 1e-12 and its probability of being
   positive within 1e-12.

Exit 0 when everything matches; 1 with a message naming the first
differing state (and action) otherwise; 2 on a usage error.
Run under /usr/bin/python3 (Debian numpy and h5py).
"""

import argparse
import os
import sys

import numpy as np

try:
    import h5py
except ImportError:  # pragma: no cover - environment problem, not a mismatch
    sys.stderr.write("crossread_model.py: h5py is missing; run it with /usr/bin/python3\n")
    sys.exit(2)

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import reservoir_twin  # noqa: E402

REWARD_RTOL = 1e-12


class Mismatch(Exception):
    pass


# ---- small twins (derived from the comments of examples/two_state.c, tie.c)

def _csr_from_lists(n_states, discount, states):
    """states: list over s of [(action, reward, [(target, prob), ...])]."""
    fp, act, rew, ft, tg, pb = [0], [], [], [0], [], []
    for pairs in states:
        for a, r, succ in pairs:
            act.append(a)
            rew.append(r)
            for t, p in succ:
                tg.append(t)
                pb.append(p)
            ft.append(len(tg))
        fp.append(len(act))
    return {"n_states": n_states, "discount": discount,
            "first_pair": np.array(fp, np.int64), "action": np.array(act, np.int32),
            "reward": np.array(rew, np.float64),
            "first_transition": np.array(ft, np.int64),
            "target": np.array(tg, np.int64), "probability": np.array(pb, np.float64)}


def twin_two_state(params):
    g = float(params.get("discount", 0.95))
    return _csr_from_lists(2, g, [
        [(0, 0.5 * 5.0 + 0.5 * 5.0, [(0, 0.5), (1, 0.5)]), (1, 10.0, [(1, 1.0)])],
        [(0, -1.0, [(1, 1.0)])],
    ])


def twin_tie(params):
    g = float(params.get("discount", 0.5))
    return _csr_from_lists(3, g, [
        [(0, 0.5, [(1, 1.0)]), (1, 0.75, [(1, 0.5), (2, 0.5)])],
        [(0, 1.0, [(2, 1.0)])],
        [(0, 0.0, [(2, 1.0)])],
    ])


def twin_reservoir(params):
    return reservoir_twin.build_csr(params)


TWINS = {"reservoir": twin_reservoir, "two_state": twin_two_state, "tie": twin_tie}
KNOWN_PARAMS = {"reservoir": set(reservoir_twin.DEFAULTS),
                "two_state": {"discount"}, "tie": {"discount"}}


# ---- reading and the contract

def _attr_str(v):
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace")
    if isinstance(v, np.ndarray) and v.shape == ():
        return _attr_str(v[()])
    return v if isinstance(v, str) else None


def _attr_int(f, name):
    if name not in f.attrs:
        raise Mismatch("attribute /%s is missing" % name)
    v = np.asarray(f.attrs[name])
    if v.shape not in ((), (1,)) or v.dtype.kind not in "iu":
        raise Mismatch("attribute /%s must be an integer scalar, got %r" % (name, f.attrs[name]))
    return int(v.reshape(()))


def read_model(path):
    m = {}
    with h5py.File(path, "r") as f:
        fmt = _attr_str(f.attrs.get("sluice_format"))
        if fmt != "model":
            raise Mismatch("attribute /sluice_format is %r, expected \"model\""
                           % f.attrs.get("sluice_format"))
        m["format_version"] = _attr_int(f, "format_version")
        if m["format_version"] not in (1, 2):
            raise Mismatch("attribute /format_version is %d, not 1 or 2" % m["format_version"])
        if _attr_str(f.attrs.get("fingerprint")) is None:
            raise Mismatch("attribute /fingerprint is missing or not a string")
        for k in ("n_states", "n_pairs", "n_transitions"):
            m[k] = _attr_int(f, k)
            if m[k] < 0:
                raise Mismatch("attribute /%s is negative" % k)
        if "discount" not in f.attrs:
            raise Mismatch("attribute /discount is missing")
        d = np.asarray(f.attrs["discount"])
        if d.dtype != np.float64 or d.size != 1:
            raise Mismatch("attribute /discount must be a float64 scalar")
        m["discount"] = float(d.reshape(()))
        obj = f.attrs.get("objective")
        if obj is not None and _attr_str(obj) not in ("discounted", "total", "average", "finite"):
            raise Mismatch("attribute /objective is %r" % obj)
        m["objective"] = _attr_str(obj) if obj is not None else "discounted"
        spec = [("state/first_pair", "first_pair", "int64", m["n_states"] + 1),
                ("pair/action", "action", "int32", m["n_pairs"]),
                ("pair/reward", "reward", "float64", m["n_pairs"]),
                ("pair/first_transition", "first_transition", "int64", m["n_pairs"] + 1),
                ("transition/target", "target", None, m["n_transitions"]),
                ("transition/probability", "probability", "float64", m["n_transitions"])]
        for dpath, key, dtype, size in spec:
            if dpath not in f:
                raise Mismatch("dataset /%s is missing" % dpath)
            ds = f[dpath]
            if not isinstance(ds, h5py.Dataset) or ds.ndim != 1:
                raise Mismatch("/%s must be a one-dimensional dataset" % dpath)
            if dtype is not None and ds.dtype != np.dtype(dtype):
                raise Mismatch("/%s has type %s, expected %s" % (dpath, ds.dtype, dtype))
            if dtype is None and not (ds.dtype.kind == "u" or ds.dtype == np.int64):
                raise Mismatch("/%s has type %s, expected unsigned or int64" % (dpath, ds.dtype))
            if ds.shape[0] != size:
                raise Mismatch("/%s has %d entries, expected %d" % (dpath, ds.shape[0], size))
            m[key] = ds[...]
        if m["format_version"] >= 2:
            read_annotations(f, m)
    m["target"] = m["target"].astype(np.int64)  # uint32 fits; uint64 above 2^63 cannot be a state
    return m


def _f64(f, dpath, size):
    if dpath not in f:
        raise Mismatch("dataset /%s is missing" % dpath)
    ds = f[dpath]
    if not isinstance(ds, h5py.Dataset) or ds.ndim != 1 or ds.dtype != np.float64 or ds.shape[0] != size:
        raise Mismatch("/%s must be float64[%d]" % (dpath, size))
    x = ds[...]
    if not np.all(np.isfinite(x)):
        raise Mismatch("/%s holds a value that is not finite" % dpath)
    return x, _attr_str(ds.attrs.get("unit"))


def read_annotations(f, m):
    """Format 2 (docs/formats.md): factor values and labels, action values,
    units and the per-pair outcome quantities."""
    m["reward_unit"] = _attr_str(f.attrs.get("reward_unit"))
    m["period_unit"] = _attr_str(f.attrs.get("period_unit"))
    names = [_attr_str(x) for x in f["labels/factor_name"][...]] if "labels/factor_name" in f else []
    sizes = f["labels/factor_size"][...] if names else []
    m["factor_values"], m["factor_labels"] = {}, {}
    for name, size in zip(names, sizes):
        if "factor/%s/value" % name in f:
            m["factor_values"][name] = _f64(f, "factor/%s/value" % name, int(size))
        if "factor/%s/label" % name in f:
            lab = [_attr_str(x) for x in f["factor/%s/label" % name][...]]
            if len(lab) != size:
                raise Mismatch("/factor/%s/label has %d entries, the factor %d" % (name, len(lab), size))
            m["factor_labels"][name] = lab
    if "action/value" in f:
        n = f["action/value"].shape[0]
        m["action_values"] = _f64(f, "action/value", n)
    m["quantities"], m["quantity_units"] = {}, {}
    qn = [_attr_str(x) for x in f["labels/quantity_name"][...]] if "labels/quantity_name" in f else []
    m["quantity_order"] = qn
    for q in qn:
        mean, unit = _f64(f, "quantity/%s/mean" % q, m["n_pairs"])
        pos, _ = _f64(f, "quantity/%s/p_positive" % q, m["n_pairs"])
        if np.any((pos < 0) | (pos > 1)):
            raise Mismatch("/quantity/%s/p_positive holds a value outside [0, 1]" % q)
        m["quantities"][q] = (mean, pos)
        m["quantity_units"][q] = unit


def compare_annotations(m, twin, gen, params):
    """The format 2 content against the twin: units, labels, values exactly;
    quantity means within REWARD_RTOL (a sum over successors like the
    reward), probabilities of being positive within 1e-12."""
    if "quantities" not in twin:
        return
    if m.get("format_version", 1) < 2:
        raise Mismatch("format_version 1, but the %s generator reports units and quantities" % gen)
    for key in ("reward_unit", "period_unit"):
        if m[key] != twin[key]:
            raise Mismatch("%s is %r, the twin has %r" % (key, m[key], twin[key]))
    for name, (vals, unit) in twin["factor_values"].items():
        if name not in m["factor_values"]:
            raise Mismatch("/factor/%s/value is missing" % name)
        fv, fu = m["factor_values"][name]
        if fu != unit or not np.array_equal(fv, vals):
            raise Mismatch("/factor/%s/value (unit %r) differs from the twin (unit %r)" % (name, fu, unit))
    for name, lab in twin["factor_labels"].items():
        if m["factor_labels"].get(name) != lab:
            raise Mismatch("/factor/%s/label is %r, the twin has %r" % (name, m["factor_labels"].get(name), lab))
    av, au = m.get("action_values", (None, None))
    if av is None or au != twin["action_values"][1] or not np.array_equal(av, twin["action_values"][0]):
        raise Mismatch("/action/value or its unit differs from the twin")
    if m["quantity_order"] != list(twin["quantity_units"]):
        raise Mismatch("quantities %s, the twin has %s" % (m["quantity_order"], list(twin["quantity_units"])))
    fp = m["first_pair"]
    for q, (tmean, tpos) in twin["quantities"].items():
        if m["quantity_units"][q] != twin["quantity_units"][q]:
            raise Mismatch("quantity %s: unit %r, the twin has %r" % (q, m["quantity_units"][q],
                                                                      twin["quantity_units"][q]))
        mean, pos = m["quantities"][q]
        scale = np.maximum(np.abs(mean), np.abs(tmean))
        bad = np.nonzero(np.abs(mean - tmean) > REWARD_RTOL * scale)[0]
        if bad.size:
            k = int(bad[0])
            raise Mismatch("%s action %d: quantity %s mean %.17g, the twin has %.17g"
                           % (_describe(gen, params, _pair_state(fp, k)), m["action"][k], q, mean[k], tmean[k]))
        bad = np.nonzero(np.abs(pos - tpos) > 1e-12)[0]
        if bad.size:
            k = int(bad[0])
            raise Mismatch("%s action %d: quantity %s p_positive %.17g, the twin has %.17g"
                           % (_describe(gen, params, _pair_state(fp, k)), m["action"][k], q, pos[k], tpos[k]))


def _pair_state(first_pair, k):
    return int(np.searchsorted(first_pair, k, side="right") - 1)


def check_contract(m, sum_tol):
    ns, npairs, ntr = m["n_states"], m["n_pairs"], m["n_transitions"]
    fp, ft = m["first_pair"], m["first_transition"]
    for name, ptr, total, unit in (("state/first_pair", fp, npairs, "state"),
                                   ("pair/first_transition", ft, ntr, "pair")):
        if ptr[0] != 0 or ptr[-1] != total:
            raise Mismatch("/%s must run from 0 to %d, runs from %d to %d"
                           % (name, total, ptr[0], ptr[-1]))
        step = np.diff(ptr)
        bad = np.nonzero(step <= 0)[0]
        if bad.size:
            raise Mismatch("/%s: %s %d has %s (at least one required)"
                           % (name, unit, bad[0], "no entries" if step[bad[0]] == 0
                              else "a decreasing pointer"))
    act = m["action"]
    if act.size and act.min() < 0:
        k = int(np.argmin(act))
        raise Mismatch("state %d: negative action id %d" % (_pair_state(fp, k), act[k]))
    # actions ascending within each state: consecutive pairs of one state
    same_state = np.ones(npairs, bool)
    same_state[fp[1:-1]] = False          # first pair of each state but state 0
    same_state[0] = False
    bad = np.nonzero(same_state[1:] & (act[1:] <= act[:-1]))[0]
    if bad.size:
        k = int(bad[0]) + 1
        raise Mismatch("state %d: action ids not ascending and unique (%d after %d)"
                       % (_pair_state(fp, k), act[k], act[k - 1]))
    tg, pb = m["target"], m["probability"]
    bad = np.nonzero((tg < 0) | (tg >= ns))[0]
    if bad.size:
        k = _pair_state(ft, bad[0])
        raise Mismatch("state %d action %d: target %d out of range [0, %d)"
                       % (_pair_state(fp, k), act[k], tg[bad[0]], ns))
    same_pair = np.ones(ntr, bool)
    same_pair[ft[:-1][ft[:-1] < ntr]] = False
    bad = np.nonzero(same_pair[1:] & (tg[1:] <= tg[:-1]))[0]
    if bad.size:
        k = _pair_state(ft, bad[0] + 1)
        raise Mismatch("state %d action %d: targets not ascending and unique"
                       % (_pair_state(fp, k), act[k]))
    bad = np.nonzero(~np.isfinite(pb) | (pb <= 0) | (pb > 1))[0]
    if bad.size:
        k = _pair_state(ft, bad[0])
        raise Mismatch("state %d action %d: probability %r outside (0, 1]"
                       % (_pair_state(fp, k), act[k], pb[bad[0]]))
    sums = np.add.reduceat(pb, ft[:-1]) if ntr else np.zeros(0)
    bad = np.nonzero(np.abs(sums - 1.0) > sum_tol)[0]
    if bad.size:
        k = int(bad[0])
        raise Mismatch("state %d action %d: probabilities sum to %.17g (tolerance %g)"
                       % (_pair_state(fp, k), act[k], sums[k], sum_tol))
    bad = np.nonzero(~np.isfinite(m["reward"]))[0]
    if bad.size:
        k = int(bad[0])
        raise Mismatch("state %d action %d: reward is not finite" % (_pair_state(fp, k), act[k]))


# ---- comparison with the twin

def _describe(gen, params, s):
    if gen != "reservoir":
        return "state %d" % s
    t = reservoir_twin.Tables(params)
    i, j, mo = t.decode(s)
    return "state %d (storage %d, inflow %d, month %d)" % (s, i, j, mo)


def compare(m, twin, gen, params):
    if m["n_states"] != twin["n_states"]:
        raise Mismatch("n_states is %d, the twin has %d" % (m["n_states"], twin["n_states"]))
    if m["discount"] != twin["discount"]:
        raise Mismatch("discount is %.17g, the twin has %.17g (pass --param discount=... "
                       "if the model was built with another discount)"
                       % (m["discount"], twin["discount"]))
    fp, tfp = m["first_pair"], twin["first_pair"]
    cnt, tcnt = np.diff(fp), np.diff(tfp)
    bad = np.nonzero(cnt != tcnt)[0]
    if bad.size:
        s = int(bad[0])
        fa = m["action"][fp[s]:fp[s + 1]].tolist()
        ta = twin["action"][tfp[s]:tfp[s + 1]].tolist()
        raise Mismatch("%s: available actions %s, the twin has %s"
                       % (_describe(gen, params, s), fa, ta))
    # same pair layout from here on; find the first pair with any difference
    firsts = []
    bad = np.nonzero(m["action"] != twin["action"])[0]
    if bad.size:
        firsts.append((int(bad[0]), "action id %d, the twin has %d"
                       % (m["action"][bad[0]], twin["action"][bad[0]])))
    ft, tft = m["first_transition"], twin["first_transition"]
    bad_cnt = np.nonzero(np.diff(ft) != np.diff(tft))[0]
    if bad_cnt.size:
        k = int(bad_cnt[0])
        firsts.append((k, "%d successors, the twin has %d"
                       % (ft[k + 1] - ft[k], tft[k + 1] - tft[k])))
    r, tr = m["reward"], twin["reward"]
    scale = np.maximum(np.abs(r), np.abs(tr))
    bad = np.nonzero(np.abs(r - tr) > REWARD_RTOL * scale)[0]
    if bad.size:
        k = int(bad[0])
        firsts.append((k, "reward %.17g, the twin has %.17g" % (r[k], tr[k])))
    # targets and probabilities, as far as the per-pair successor counts
    # agree (before that pair both files index transitions the same way)
    kc = int(bad_cnt[0]) if bad_cnt.size else m["n_pairs"]
    n_same = int(ft[kc])
    for key in ("target", "probability"):
        a, b = m[key][:n_same], twin[key][:n_same]
        diff = np.nonzero(a != b)[0]
        if diff.size:
            t = int(diff[0])
            k = int(np.searchsorted(ft, t, side="right") - 1)
            firsts.append((k, "%s %r at successor %d, the twin has %r"
                           % (key, a[t].item(), t - ft[k], b[t].item())))
    if firsts:
        k, msg = min(firsts, key=lambda x: x[0])
        s = _pair_state(fp, k)
        raise Mismatch("%s action %d: %s" % (_describe(gen, params, s), m["action"][k], msg))


def parse_params(items):
    out = {}
    for it in items or []:
        if "=" not in it:
            raise ValueError("--param needs NAME=VALUE, got %r" % it)
        k, v = it.split("=", 1)
        out[k.strip()] = float(v)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description="cross-read a model file against an independent twin")
    ap.add_argument("model")
    ap.add_argument("--param", action="append", default=[], metavar="NAME=VALUE")
    ap.add_argument("--generator", choices=sorted(TWINS), default="reservoir")
    ap.add_argument("--sum-tolerance", type=float, default=1e-12)
    ap.add_argument("--quiet", action="store_true")
    args = ap.parse_args(argv)
    try:
        params = parse_params(args.param)
    except ValueError as e:
        sys.stderr.write("crossread_model.py: %s\n" % e)
        return 2
    unknown = set(params) - KNOWN_PARAMS[args.generator]
    if unknown:
        sys.stderr.write("crossread_model.py: unknown parameter(s) for %s: %s\n"
                         % (args.generator, ", ".join(sorted(unknown))))
        return 2
    try:
        m = read_model(args.model)
        check_contract(m, args.sum_tolerance)
        twin = TWINS[args.generator](params)
        compare(m, twin, args.generator, params)
        compare_annotations(m, twin, args.generator, params)
    except Mismatch as e:
        sys.stderr.write("crossread_model.py: %s: MISMATCH: %s\n" % (args.model, e))
        return 1
    except OSError as e:
        sys.stderr.write("crossread_model.py: cannot read %s: %s\n" % (args.model, e))
        return 1
    if not args.quiet:
        print("crossread_model.py: %s matches the %s twin: %d states, %d pairs, "
              "%d transitions, discount %.17g"
              % (args.model, args.generator, m["n_states"], m["n_pairs"],
                 m["n_transitions"], m["discount"]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
