#!/usr/bin/python3
"""test_units.py - units and the relative certificate in every output that
prints a value: `sluice solve` (summary and --report JSON), `verify` (text
and --json), `evaluate`, and `export` (CSV header and columns).

usage: test_units.py SLUICE_BINARY WORKDIR

The files are read independently with h5py (Debian package python3-h5py)
and the numbers recomputed with numpy (python3-numpy): the model's units
(root attributes reward_unit / period_unit, /factor/NAME/value with its unit
attribute, /factor/NAME/label, /action/value with its unit), the solution's
/value and /policy. Checks: each printed or written unit is the file's;
value_min / value_max / value_min_abs are numpy's over /value; the relative
bound is the bound over the smallest |value| (docs/results.md), in the JSON
and, to the two digits printed, in the text; every export column agrees
with the files; a model with a zero value says there is no relative figure
(JSON null). A model without units (imported CSV) writes no brackets.

Run under /usr/bin/python3 (Debian numpy and h5py).
"""

import csv
import json
import os
import re
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
RESERVOIR = os.path.join(HERE, "..", "..", "examples", "reservoir.c")
NUM = r"([-+0-9.eE]+)"


def s(x):
    return x.decode() if isinstance(x, bytes) else str(x)


def phrase(text, lead):
    """(bound, unit, relative or None) of the first '<lead> <= B UNIT, R of the smallest ...' in text."""
    m = re.search(re.escape(lead) + r" <= " + NUM + r" (.+?), (?:" + NUM + r" of the smallest value in magnitude|"
                  r"(no relative figure))", text)
    if not m:
        return None
    return float(m.group(1)), m.group(2), (float(m.group(3)) if m.group(3) else None)


def close2(a, b):
    """Equal to the two significant digits printed (%.2g)."""
    return float("%.2g" % b) == a


def main():
    binary, work = mc.parse_args(sys.argv, "test_units.py SLUICE_BINARY WORKDIR")
    chk = mc.Checker("units")
    model, sol, rep, vals = (os.path.join(work, x) for x in ("res.h5", "sol.h5", "rep.json", "v.h5"))
    mc.run_sluice(binary, ["build", "-q", RESERVOIR, "--param", "storage_levels=21", "--param", "inflow_classes=3",
                           "--param", "release_levels=5", "-o", model])
    cp = mc.run_sluice(binary, ["solve", model, "-o", sol, "--report", rep])
    with h5py.File(model, "r") as f:
        ru, pu = s(f.attrs["reward_unit"]), s(f.attrs["period_unit"])
        fnames = [s(x) for x in f["labels/factor_name"][...]]
        fsize = f["labels/factor_size"][...]
        fval, flab, funit = {}, {}, {}
        for k in fnames:
            g = f["factor/" + k]
            if "value" in g:
                fval[k] = g["value"][...]
                funit[k] = s(g["value"].attrs.get("unit", b""))
            if "label" in g:
                flab[k] = [s(x) for x in g["label"][...]]
        aval, aunit = f["action/value"][...], s(f["action/value"].attrs["unit"])
        anames = [s(x) for x in f["labels/action_name"][...]]
    with h5py.File(sol, "r") as f:
        v, pol = f["value"][...], f["policy"][...].astype(np.int64)
        vb, pb = float(f.attrs["value_error_bound"]), float(f.attrs["policy_loss_bound"])
    vmin, vmax, vabs = float(v.min()), float(v.max()), float(np.abs(v).min())
    chk.check(ru == "kCU" and pu == "month", "the reservoir declares its units", "%s, %s" % (ru, pu))

    # ---- solve --report
    with open(rep) as f:
        r = json.load(f)
    for key in ("value_error_bound", "policy_loss_bound", "tolerance", "residual_sup", "history", "caution"):
        chk.check(key in r, "report keeps the key %s" % key)
    chk.check(r.get("units") == {"reward": ru, "period": pu}, "report: units = the model file's", str(r.get("units")))
    chk.check(r.get("value_min") == vmin and r.get("value_max") == vmax and r.get("value_min_abs") == vabs,
              "report: value_min/max/min_abs = numpy over /value", "%s vs %g %g %g" % (
                  [r.get(k) for k in ("value_min", "value_max", "value_min_abs")], vmin, vmax, vabs))
    for key, b in (("value_error_relative", vb), ("policy_loss_relative", pb)):
        got = r.get(key)
        chk.check(got is not None and abs(got - b / vabs) <= 1e-12 * b / vabs,
                  "report: %s = bound / min|value|" % key, "%s vs %.6g" % (got, b / vabs))

    # ---- solve summary
    p = phrase(cp.stderr, "|value - v*|")
    chk.check(p is not None and p[1] == ru and close2(p[0], vb) and p[2] is not None and close2(p[2], vb / vabs),
              "solve summary: value bound in %s and relative to the smallest value" % ru, str(p))
    p = phrase(cp.stderr, "v* - v_policy")
    chk.check(p is not None and p[1] == ru and close2(p[0], pb) and close2(p[2], pb / vabs),
              "solve summary: policy bound in %s and relative" % ru, str(p))

    # ---- verify, text and JSON
    cp = mc.run_sluice(binary, ["verify", model, sol])
    j = json.loads(mc.run_sluice(binary, ["verify", model, sol, "--json"]).stdout)
    chk.check(j.get("units", {}).get("reward") == ru, "verify --json: reward unit", str(j.get("units")))
    for key, bk in (("value_error_relative", "value_error_bound"), ("policy_loss_relative", "policy_loss_bound")):
        chk.check(abs(j[key] - j[bk] / vabs) <= 1e-12 * j[key], "verify --json: %s = %s / min|value|" % (key, bk))
    p = phrase(cp.stdout, "|value - v*|")
    chk.check(p is not None and p[1] == ru and close2(p[0], j["value_error_bound"])
              and close2(p[2], j["value_error_bound"] / vabs), "verify text: value bound with unit and relative",
              str(p))
    p = phrase(cp.stdout, "v* - v_policy")
    chk.check(p is not None and p[1] == ru and close2(p[2], j["policy_loss_bound"] / vabs),
              "verify text: policy bound with unit and relative", str(p))

    # ---- evaluate
    cp = mc.run_sluice(binary, ["evaluate", model, "--policy", sol, "-o", vals])
    with h5py.File(vals, "r") as f:
        ve, eb = f["value"][...], float(f.attrs["value_error_bound"])
    p = phrase(cp.stderr, "|value - v_policy|")
    chk.check(p is not None and p[1] == ru and close2(p[0], eb) and close2(p[2], eb / float(np.abs(ve).min())),
              "evaluate: bound in %s and relative to its smallest value" % ru, str(p))

    # ---- export
    out = os.path.join(work, "plan.csv")
    mc.run_sluice(binary, ["export", sol, "--model", model, "-o", out])
    with open(out) as f:
        rows = list(csv.reader(f))
    head, body = rows[0], rows[1:]
    want = ["state"]
    for k in fnames:
        want.append(k + "@")
        if k in flab:
            want.append(k)          # labels (months) carry no unit
        elif k in fval:
            want.append("%s [%s]" % (k, funit[k]) if funit[k] else k)
    want += ["action", "action_name", "action_value [%s]" % aunit, "value [%s]" % ru]
    chk.check(head == want, "export header: indices, values/labels with units, action value, value unit",
              "%s vs %s" % (head, want))
    n = len(v)
    chk.check(len(body) == n, "export: one row per state", "%d rows" % len(body))
    if head == want and len(body) == n:
        col = {h: i for i, h in enumerate(head)}
        idx = np.array([[int(r[col[k + "@"]]) for k in fnames] for r in body])
        strides = np.cumprod([1] + list(fsize[:-1]))
        chk.check(np.array_equal(idx @ strides, np.arange(n)), "export: NAME@ indices decode each state number")
        for j2, k in enumerate(fnames):
            name = want[col[k + "@"] + 1] if col[k + "@"] + 1 < len(want) else None
            if k in flab:
                bad = sum(r[col[k]] != flab[k][idx[i, j2]] for i, r in enumerate(body))
                chk.check(bad == 0, "export: %s labels = /factor/%s/label" % (k, k), "%d differ" % bad)
            elif k in fval:
                got = np.array([float(r[col[name]]) for r in body])
                chk.check(np.allclose(got, fval[k][idx[:, j2]], rtol=1e-14, atol=0),
                          "export: %s values = /factor/%s/value" % (k, k))
        a = np.array([int(r[col["action"]]) for r in body])
        chk.check(np.array_equal(a, pol), "export: action = /policy")
        chk.check(all(body[i][col["action_name"]] == anames[a[i]] for i in range(n)), "export: action names")
        av = np.array([float(r[col["action_value [%s]" % aunit]]) for r in body])
        chk.check(np.allclose(av, aval[pol], rtol=1e-14, atol=0), "export: action_value = /action/value[policy]")
        vv = np.array([float(r[col["value [%s]" % ru]]) for r in body])
        chk.check(np.array_equal(vv, v), "export: value = /value exactly (17 digits)")

    # ---- a model without units, one state of value 0 (no relative figure)
    tri = os.path.join(work, "zero.csv")
    with open(tri, "w") as f:
        f.write("state,action,next_state,probability,reward\n0,0,0,1,0\n1,0,0,1,2\n1,1,1,1,1\n")
    zm, zs = os.path.join(work, "zero.h5"), os.path.join(work, "zero_sol.h5")
    mc.run_sluice(binary, ["import", tri, "--discount", "0.9", "-o", zm])
    cp = mc.run_sluice(binary, ["solve", zm, "-o", zs, "--report", rep, "--method", "pi"])  # exact: v(0) = 0
    with open(rep) as f:
        r = json.load(f)
    chk.check(r.get("value_error_relative", 0) is None and r.get("units") == {"reward": "", "period": ""},
              "report of a unitless model with a zero value: relative null, empty units",
              "%s %s" % (r.get("value_error_relative"), r.get("units")))
    p = phrase(cp.stderr, "|value - v*|")
    chk.check(p is not None and p[1] == "reward units" and p[2] is None,
              "solve summary: 'reward units' and no relative figure when a value is 0", str(p))
    out = os.path.join(work, "zero.csv.out")
    mc.run_sluice(binary, ["export", zs, "--model", zm, "-o", out])
    with open(out) as f:
        head = next(csv.reader(f))
    chk.check(head == ["state", "action", "action_name", "value"], "export of a unitless model: no brackets",
              str(head))
    chk.finish()


if __name__ == "__main__":
    main()
