"""test_report.py - `sluice report` end to end, judged from outside sluice.

    /usr/bin/python3 test_report.py SLUICE WORKDIR REPORT_DIR

REPORT_DIR is the project's report/ directory (render.mjs and the npm
packages installed there by tools/setup). A real headless Chromium (Debian's
chromium package, driven by playwright-core) opens each page; h5py reads the
model and solution files independently; numpy recomputes the Bellman
residual; Python's own XML parser and zlib read the SVG and PNG files.

Cases:
  1. the demo reservoir (examples/reservoir.c, small grid): page, figures,
     certificate numbers, rule map against /policy, a screenshot;
  2. a model imported from triplets, without factors: the map, water values
     and outlook are left out with a reason, everything else is there;
  3. bad input: a solution of another model, an unwritable output, missing
     Node.js or npm packages: sysexits code, message naming the problem, and
     no report (nor a temporary) left behind.
"""

import json
import os
import shutil
import struct
import subprocess
import sys
import xml.etree.ElementTree as ET
import zlib

import h5py
import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "python"))
import mdp_common as mc  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.abspath(os.path.join(HERE, "..", ".."))
EX_UNAVAILABLE = 69
EX_CANTCREAT = 73


def run(cmd, env=None, timeout=600):
    return subprocess.run([str(c) for c in cmd], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                          timeout=timeout, env=env)


def open_page(report_dir, html, shot=None):
    """Load the page in Chromium; return check_page.mjs's JSON summary."""
    cmd = ["node", os.path.join(HERE, "check_page.mjs"), report_dir, html] + ([shot] if shot else [])
    cp = run(cmd)
    if cp.returncode != 0:
        raise RuntimeError("check_page.mjs failed (%d): %s" % (cp.returncode, cp.stderr[-2000:]))
    return json.loads(cp.stdout)


def svg_data(path):
    """Parse an SVG (must be well-formed XML) and return its embedded data."""
    root = ET.parse(path).getroot()
    ns = "{http://www.w3.org/2000/svg}"
    meta = root.find(ns + "metadata")
    texts = [t.text or "" for t in root.iter(ns + "text")]
    return root, (json.loads(meta.text) if meta is not None else None), texts


def png_facts(path):
    """PNG signature, IHDR size and whether the pixels vary (W3C PNG spec,
    2nd ed., 2003, sections 5.2 (signature), 11.2.2 (IHDR), 11.2.4 (IDAT))."""
    with open(path, "rb") as f:
        b = f.read()
    if b[:8] != b"\x89PNG\r\n\x1a\n":
        return None
    pos, idat, size = 8, b"", None
    while pos < len(b):
        (n,) = struct.unpack(">I", b[pos:pos + 4])
        kind = b[pos + 4:pos + 8]
        body = b[pos + 8:pos + 8 + n]
        if kind == b"IHDR":
            size = struct.unpack(">II", body[:8])
        elif kind == b"IDAT":
            idat += body
        pos += 12 + n
    raw = zlib.decompress(idat)
    return {"size": size, "distinct_bytes": len(set(raw[:4_000_000]))}


def no_leftovers(chk, directory, what):
    left = [f for f in os.listdir(directory) if f.endswith(".partial") or f.endswith(".data.json")]
    chk.check(not left, "%s: no temporary files left" % what, str(left))


def check_common(chk, label, page, sol_path, model_path):
    """Checks every report must pass, against the files read with h5py."""
    chk.check(page["console_errors"] == [] and page["page_errors"] == [],
              "%s: no console or page errors" % label, str(page["console_errors"] + page["page_errors"]))
    chk.check(page["external_requests"] == [] and page["scripts_with_src"] == [] and page["links"] == []
              and page["images_external"] == [],
              "%s: self-contained (no external scripts, links, images or requests)" % label,
              str(page["external_requests"] + page["scripts_with_src"] + page["links"]))
    with h5py.File(sol_path, "r") as f:
        attrs = {k: mc._attr(f, k) for k in f.attrs}
        value = f["value"][...]
    with h5py.File(model_path, "r") as f:
        fp = mc._attr(f, "fingerprint")
    cert = page["certificate"]
    for key in ("value_error_bound", "policy_loss_bound", "tolerance", "residual_sup", "residual_span"):
        shown = cert.get(key, {}).get("value")
        chk.check(shown == attrs[key], "%s: page %s equals the solution file's attribute" % (label, key),
                  "page %r, file %r" % (shown, attrs[key]))
        # the text a reviewer reads rounds the same number
        txt = cert.get(key, {}).get("text", "nan")
        chk.check(abs(float(txt) - attrs[key]) <= 0.06 * abs(attrs[key]),
                  "%s: displayed %s rounds the file's value" % (label, key), "%s vs %r" % (txt, attrs[key]))
    smallest = float(np.min(np.abs(value)))
    rel = cert.get("value_error_relative", {}).get("value")
    chk.check(rel is not None and abs(rel - attrs["value_error_bound"] / smallest) <= 1e-12 * rel,
              "%s: relative bound = bound / min|value| recomputed from /value" % label,
              "page %r, numpy %r" % (rel, attrs["value_error_bound"] / smallest))
    chk.check(page["fingerprint"] == fp, "%s: fingerprint shown is the model's" % label)
    chk.check(page["verdict"] == "CERTIFIED" and page["verify"] == "pass",
              "%s: verdict and independent verification shown as certified" % label,
              "%s / %s" % (page["verdict"], page["verify"]))
    cap = page["caution"] or ""
    chk.check("never replace" in cap and "licensed engineers" in cap and "regulations" in cap,
              "%s: the caution note is on the page" % label)
    return attrs, value


def factor_labels(f, name, size):
    """How a factor's index is labelled (docs/formats.md, format 2): its label,
    else its numeric value printed as %.6g, else the index; read with h5py."""
    g = "factor/%s/" % name
    if g + "label" in f:
        return [x.decode() for x in f[g + "label"][...]]
    if g + "value" in f:
        return ["%.6g" % x for x in f[g + "value"][...]]
    return [str(i) for i in range(size)]


def bellman_residual(model_path, value):
    """sup |T v - v| recomputed in numpy/scipy from the model file (Puterman
    1994, Markov Decision Processes, section 6.6: the residual that the
    certificate is built from)."""
    mdp = mc.read_model(model_path)
    tv, _, _ = mdp.bellman(value)
    return float(np.max(np.abs(tv - value))), mdp


def check_outlook(chk, model, mdp, policy, factor_rows, quantity_rows, L, J, stages=24):
    """The outlook plots against an exact forward propagation done here with
    scipy: mu_{t+1} = mu_t P_pi from the report's default start (storage and
    inflow at their middle index, month 0), P_pi built from the model file
    (h5py); storage mean and lower quantiles (smallest value whose cumulative
    probability reaches p) by stage, and each quantity's expected value and
    probability of being positive under mu_t."""
    pairs, bad = mdp.pairs_of_policy(policy)
    Ppi = mdp.P[pairs].tocsr()
    n = mdp.n
    with h5py.File(model, "r") as f:
        S = f["factor/storage/value"][...]
        qnames = [x.decode() for x in f["labels/quantity_name"][...]] if "labels/quantity_name" in f else []
        qunit = {q: mc._attr(f["quantity/%s/mean" % q], "unit") for q in qnames}
        qmean = {q: f["quantity/%s/mean" % q][...][pairs] for q in qnames}
        qpos = {q: f["quantity/%s/p_positive" % q][...][pairs] for q in qnames}
    mu = np.zeros(n)
    mu[L // 2 + L * (J // 2)] = 1.0
    level = np.arange(n) % L
    worst, count = 0.0, 0
    for t in range(stages + 1):
        if factor_rows is not None:
            w = np.bincount(level, weights=mu, minlength=L)
            cdf = np.cumsum(w)
            want = {"mean": float(mu @ S[level])}
            for p, key in ((0.05, "p5"), (0.25, "p25"), (0.5, "p50"), (0.75, "p75"), (0.95, "p95")):
                want[key] = float(S[int(np.argmax(cdf >= p - 1e-12))])
            row = [r for r in factor_rows if r["stage"] == t and r["factor"] == "storage"]
            for key, x in want.items():
                got = row[0][key] if row else float("nan")
                err = abs(got - x) / max(1.0, abs(x))
                worst = max(worst, err) if err == err else float("inf")   # a missing row fails
                count += 1
        if quantity_rows is not None:
            for q in qnames:
                label = "%s (%s)" % (q, qunit[q]) if qunit[q] else q
                row = [r for r in quantity_rows if r["stage"] == t and r["quantity"] == label]
                for key, x in (("mean", float(mu @ qmean[q])), ("p_positive", float(mu @ qpos[q]))):
                    got = row[0][key] if row else float("nan")
                    err = abs(got - x) / max(1.0, abs(x))
                    worst = max(worst, err) if err == err else float("inf")
                    count += 1
        mu = Ppi.T @ mu
    what = "storage mean and quantiles" if factor_rows is not None else "expected quantities and P(> 0)"
    chk.check(bad.size == 0 and count > 0 and worst <= 1e-9,
              "demo: outlook plot carries the %s of an exact propagation recomputed with scipy" % what,
              "%d numbers, worst relative difference %.2e" % (count, worst))


def obj_page(chk, binary, rdir, env, label, model, sol, html, data):
    """Report of a finite/average solution: the page and its data document."""
    cp = run([binary, "report", model, sol, "-o", html, "--data", data], env=env)
    chk.check(cp.returncode == 0, "%s: sluice report exits 0" % label, cp.stderr[-1500:])
    if cp.returncode != 0:
        return None, None
    page = open_page(rdir, html)
    chk.check(page["console_errors"] == [] and page["page_errors"] == [] and page["external_requests"] == [],
              "%s: no console or page errors, no requests" % label,
              str(page["console_errors"] + page["page_errors"] + page["external_requests"]))
    with open(data) as f:
        doc = json.load(f)
    return page, doc


def same_as_file(chk, label, page, attrs, keys):
    """Every certificate number on the page equals the solution file's attribute (h5py)."""
    for key, attr in keys:
        shown = page["certificate"].get(key, {}).get("value")
        chk.check(shown == attrs[attr], "%s: page %s equals the solution file's %s" % (label, key, attr),
                  "page %r, file %r" % (shown, attrs.get(attr)))


def check_objectives(chk, binary, work, rdir, env, L, J):
    """Average reward (relative value iteration) and finite horizon (backward
    induction) on the demo reservoir: the objective's own certificate on the
    page, equal to the solution file's attributes read with h5py, and the
    objectives' verify recomputed; a tampered file is shown NOT CERTIFIED."""
    gen = os.path.join(ROOT, "examples", "reservoir.c")
    # -- average: min(Th - h) <= g* <= max(Th - h) (Puterman 1994, Markov Decision
    #    Processes, Wiley, Theorem 8.5.5; theorem number recalled from memory)
    am, asol = os.path.join(work, "avg.h5"), os.path.join(work, "avg-solution.h5")
    mc.run_sluice(binary, ["build", gen, "--param", "storage_levels=%d" % L, "--param", "inflow_classes=%d" % J,
                           "--objective", "average", "-o", am])
    mc.run_sluice(binary, ["solve", am, "-o", asol, "--tolerance", "1e-6"])
    page, doc = obj_page(chk, binary, rdir, env, "average", am, asol, os.path.join(work, "avg.html"),
                         os.path.join(work, "avg-data.json"))
    if page is not None:
        with h5py.File(asol, "r") as f:
            attrs = {k: mc._attr(f, k) for k in f.attrs}
            h = f["value"][...].astype(np.float64)
        same_as_file(chk, "average", page, attrs, [(k, k) for k in (
            "gain", "gain_lower", "gain_upper", "value_error_bound", "policy_loss_bound", "tolerance",
            "residual_span")])
        span = page["certificate"].get("bias_span", {}).get("value")
        chk.check(span == float(np.max(h) - np.min(h)), "average: bias span = max h - min h of /value (numpy)",
                  "page %r, numpy %r" % (span, float(np.max(h) - np.min(h))))
        # verify's min/max of Th - h against numpy's, undiscounted, from the model file
        mdp = mc.read_model(am)
        mdp.gamma = 1.0
        th, _, _ = mdp.bellman(h)
        lo, hi = float(np.min(th - h)), float(np.max(th - h))
        vlo = page["certificate"].get("verify_residual_min", {}).get("value")
        vhi = page["certificate"].get("verify_residual_max", {}).get("value")
        # roundoff of one undiscounted backup, a few dozen operations (the form of
        # Higham 2002, Accuracy and Stability of Numerical Algorithms, section 3.1;
        # the factor 64 is common practice, no source); far below the span of
        # Th - h (about 1e-6 here), so a swapped min and max is caught
        tol_fp = 64 * np.finfo(float).eps * (float(np.max(np.abs(h))) + float(np.max(np.abs(mdp.r))))
        chk.check(vlo is not None and vhi is not None and abs(vlo - lo) <= tol_fp and abs(vhi - hi) <= tol_fp,
                  "average: verify's min and max of Th - h equal numpy's", "sluice %r %r, numpy %r %r" % (
                      vlo, vhi, lo, hi))
        glo = page["certificate"].get("verify_gain_lower", {}).get("value")
        ghi = page["certificate"].get("verify_gain_upper", {}).get("value")
        chk.check(glo is not None and ghi is not None and glo <= attrs["gain"] <= ghi and ghi - glo <= 2e-6,
                  "average: the stored gain lies in verify's recomputed bounds", "%r <= %r <= %r" % (
                      glo, attrs["gain"], ghi))
        chk.check(page["verdict"] == "CERTIFIED" and page["verify"] == "pass",
                  "average: verdict and verification certified", "%s / %s" % (page["verdict"], page["verify"]))
        text = page["certificate_text"] or ""
        chk.check("gain" in text and "bias" in text and "kCU" in text,
                  "average: the certificate speaks of the gain and the bias in the reward unit", text)
        stages = doc.get("outlook", {}).get("stages", [])
        chk.check(stages and all("discounted_reward" not in s for s in stages),
                  "average: the outlook carries no discounted reward (the objective has none)")
        # a tampered gain: the objectives' verify must catch it and the page say so
        bad = os.path.join(work, "avg-tampered.h5")
        shutil.copy(asol, bad)
        with h5py.File(bad, "r+") as f:
            f.attrs["gain"] = attrs["gain"] + 1e-3
        tpage, _ = obj_page(chk, binary, rdir, env, "average tampered", am, bad, os.path.join(work, "avg-t.html"),
                            os.path.join(work, "avg-t.json"))
        if tpage is not None:
            chk.check(tpage["verdict"] == "NOT CERTIFIED" and tpage["verify"] == "fail",
                      "average: a gain moved by 1e-3 is shown NOT CERTIFIED", "%s / %s" % (
                          tpage["verdict"], tpage["verify"]))
    # -- finite horizon: 24 monthly stages from zero terminal values
    H = 24
    fm, fsol = os.path.join(work, "fin.h5"), os.path.join(work, "fin-solution.h5")
    mc.run_sluice(binary, ["build", gen, "--param", "storage_levels=%d" % L, "--param", "inflow_classes=%d" % J,
                           "--objective", "finite", "-o", fm])
    mc.run_sluice(binary, ["solve", fm, "-o", fsol, "--horizon", str(H)])
    page, doc = obj_page(chk, binary, rdir, env, "finite", fm, fsol, os.path.join(work, "fin.html"),
                         os.path.join(work, "fin-data.json"))
    if page is not None:
        with h5py.File(fsol, "r") as f:
            attrs = {k: mc._attr(f, k) for k in f.attrs}
        same_as_file(chk, "finite", page, attrs, [(k, k) for k in (
            "horizon", "roundoff_bound", "value_error_bound", "policy_loss_bound", "tolerance")])
        chk.check(page["certificate"].get("horizon", {}).get("value") == H, "finite: the page gives %d stages" % H)
        chk.check(attrs.get("terminal") in (page["certificate_text"] or ""),
                  "finite: the page names the terminal values' source", page["certificate_text"])
        chk.check(page["verdict"] == "CERTIFIED" and page["verify"] == "pass",
                  "finite: verdict and verification certified", "%s / %s" % (page["verdict"], page["verify"]))
        # a tampered middle stage: its residual shows in the recomputed bound
        bad = os.path.join(work, "fin-tampered.h5")
        shutil.copy(fsol, bad)
        with h5py.File(bad, "r+") as f:
            f["stage/value_000005"][3] += 1.0
        tpage, _ = obj_page(chk, binary, rdir, env, "finite tampered", fm, bad, os.path.join(work, "fin-t.html"),
                            os.path.join(work, "fin-t.json"))
        if tpage is not None:
            vb = tpage["certificate"].get("verify_value_error_bound", {}).get("value")
            chk.check(tpage["verdict"] == "NOT CERTIFIED" and tpage["verify"] == "fail" and vb is not None and vb > 0.5,
                      "finite: a stage value moved by 1 is shown NOT CERTIFIED (verify's bound > 0.5)",
                      "%s / %s, bound %r" % (tpage["verdict"], tpage["verify"], vb))


def check_total(chk, binary, work, rdir, env):
    """Total reward to absorption on an invented random model (the objectives
    test's random_ssp: every pair reaches an absorbing state with probability
    >= 1/8): the page's numbers equal the solution file's, the absorbing
    states counted with numpy from the model file, a changed value caught."""
    import test_objectives as tobj   # tests/python, on sys.path above
    mdp = tobj.float_states(tobj.random_ssp(20261203, 40), 1.0)
    tm = tobj.imp(binary, mdp, work, "ssp", "total")
    tsol = os.path.join(work, "ssp-solution.h5")
    mc.run_sluice(binary, ["solve", tm, "-o", tsol, "--tolerance", "1e-8"])
    page, _ = obj_page(chk, binary, rdir, env, "total", tm, tsol, os.path.join(work, "ssp.html"),
                       os.path.join(work, "ssp-data.json"))
    if page is None:
        return
    with h5py.File(tsol, "r") as f:
        attrs = {k: mc._attr(f, k) for k in f.attrs}
    same_as_file(chk, "total", page, attrs, [(k, k) for k in (
        "n_absorbing", "steps_bound_max", "value_error_bound", "policy_loss_bound", "tolerance")])
    # absorbing: every action stays with probability 1 and reward 0 (numpy, model file)
    m = mc.read_model(tm)
    P = m.P.tocsr()
    stay = np.array([P[q, s] == 1.0 and m.r[q] == 0.0 for s in range(m.n)
                     for q in range(m.first_pair[s], m.first_pair[s + 1])])
    per_state = np.logical_and.reduceat(stay, m.first_pair[:-1])
    chk.check(page["certificate"].get("n_absorbing", {}).get("value") == int(per_state.sum()),
              "total: the absorbing states shown are those counted with numpy from the model file",
              "page %r, numpy %d" % (page["certificate"].get("n_absorbing", {}).get("value"), per_state.sum()))
    chk.check(page["verdict"] == "CERTIFIED" and page["verify"] == "pass",
              "total: verdict and verification certified", "%s / %s" % (page["verdict"], page["verify"]))
    bad = os.path.join(work, "ssp-tampered.h5")
    shutil.copy(tsol, bad)
    with h5py.File(bad, "r+") as f:
        f["value"][5] += 0.5
    tpage, _ = obj_page(chk, binary, rdir, env, "total tampered", tm, bad, os.path.join(work, "ssp-t.html"),
                        os.path.join(work, "ssp-t.json"))
    if tpage is not None:
        chk.check(tpage["verdict"] == "NOT CERTIFIED" and tpage["verify"] == "fail",
                  "total: a value moved by 0.5 is shown NOT CERTIFIED", "%s / %s" % (
                      tpage["verdict"], tpage["verify"]))


def main():
    if len(sys.argv) != 4:
        sys.stderr.write("usage: test_report.py SLUICE WORKDIR REPORT_DIR\n")
        return 2
    binary, work, rdir = os.path.abspath(sys.argv[1]), os.path.abspath(sys.argv[2]), os.path.abspath(sys.argv[3])
    chk = mc.Checker("report")
    if os.path.isdir(work):
        shutil.rmtree(work)
    os.makedirs(work)
    env = dict(os.environ, SLUICE_REPORT_DIR=rdir)

    # ---- 1. the demo reservoir ------------------------------------------------
    L, J = 30, 3
    model, sol = os.path.join(work, "tamsel.h5"), os.path.join(work, "tamsel-solution.h5")
    mc.run_sluice(binary, ["build", os.path.join(ROOT, "examples", "reservoir.c"), "--param", "storage_levels=%d" % L,
                           "--param", "inflow_classes=%d" % J, "-o", model])
    mc.run_sluice(binary, ["solve", model, "-o", sol, "--tolerance", "1e-6"])
    html, figs, data = (os.path.join(work, "tamsel.html"), os.path.join(work, "figures"),
                        os.path.join(work, "tamsel-data.json"))
    cp = run([binary, "report", model, sol, "-o", html, "--figures", figs, "--data", data], env=env)
    chk.check(cp.returncode == 0, "demo: sluice report exits 0", cp.stderr[-1500:])
    if cp.returncode != 0:
        chk.finish()
    shot = os.path.join(work, "tamsel-first-screen.png")
    page = open_page(rdir, html, shot)
    attrs, value = check_common(chk, "demo", page, sol, model)
    chk.note("screenshot of the first screen: %s" % shot)
    with h5py.File(model, "r") as f:
        numeric_storage = "factor/storage/value" in f
        reward_unit = mc._attr(f, "reward_unit") or "reward units"
        labels = {n: factor_labels(f, n, k) for n, k in (("storage", L), ("inflow", J), ("month", 12))}
        storage_values = f["factor/storage/value"][...] if numeric_storage else None
    chk.check(reward_unit in (page["certificate_text"] or ""),
              "demo: the certificate is given in the model's reward unit (%s)" % reward_unit,
              page["certificate_text"])
    # water values need the numeric storage values of a format 2 model; the
    # outlook plots, a sluice with the exact outlook and such a model
    has_outlook = run([binary, "outlook", "--help"]).returncode == 0
    expected = {"convergence", "rule_map"} | ({"water_values"} if numeric_storage else set())
    if has_outlook and numeric_storage:
        expected |= {"outlook_factors", "outlook_quantities"}
    chk.check(set(page["figures"]) == expected and set(page["rendered"] or []) == expected,
              "demo: the convergence plot and the rule map are drawn", str(sorted(page["figures"])))
    for name in expected:
        f = page["figures"].get(name, {})
        nmarks = sum(f.get("marks", {}).values())
        chk.check(f.get("svg") and f.get("width", 0) > 100 and f.get("height", 0) > 100 and nmarks > 0,
                  "demo: figure %s is non-empty in the page" % name, str(f.get("marks")))
    # every state of the small model is one cell of the map (L x 12 months x J panels)
    chk.check(page["figures"]["rule_map"]["marks"]["rect"] == L * 12 * J,
              "demo: the map has one cell per state", "%d cells for %d states" % (
                  page["figures"]["rule_map"]["marks"]["rect"], L * 12 * J))
    chk.check(page.get("tooltip") and "storage" in page["tooltip"] and "action" in page["tooltip"],
              "demo: hovering a map cell shows its labels and action", repr(page.get("tooltip")))
    for name in {"water_values", "outlook_factors", "outlook_quantities"} - expected:
        chk.check(name in page["omitted"] and len(page["omitted"][name]) > 20,
                  "demo: %s left out with a reason" % name, page["omitted"].get(name, "missing"))

    # verify's residual against numpy's
    res, mdp = bellman_residual(model, value)
    with open(data) as f:
        doc = json.load(f)
    vres = doc["verify"]["residual_sup"]
    chk.check(abs(vres - res) <= mc.roundoff_allowance(mdp, value) * (1 - mdp.gamma),
              "demo: verify's residual sup|Tv - v| matches numpy's", "sluice %r, numpy %r" % (vres, res))
    chk.check(page["certificate"]["verify_residual_sup"]["value"] == vres,
              "demo: the page shows the verification's residual")

    # figures: SVG well-formed and carrying the plotted numbers; PNG valid
    with h5py.File(sol, "r") as f:
        hist = {k: f["history/" + k][...] for k in ("sweeps", "seconds", "span", "value_error_bound",
                                                    "policy_loss_bound")}
        policy = f["policy"][...]
    with h5py.File(model, "r") as f:
        names = [x.decode() for x in f["labels/action_name"][...]]
    for name in expected:
        svg, png = os.path.join(figs, name + ".svg"), os.path.join(figs, name + ".png")
        try:
            root, meta, texts = svg_data(svg)
            ok = root.tag.endswith("svg") and meta is not None and meta["fingerprint"] == attrs["model_fingerprint"]
        except (ET.ParseError, OSError, ValueError) as e:
            ok, meta, texts = False, None, []
            chk.note("%s: %s" % (svg, e))
        chk.check(ok, "demo: %s.svg is well-formed XML with its data and the model's fingerprint" % name)
        facts = png_facts(png)
        w, h = (float(root.get("width")), float(root.get("height"))) if ok else (0, 0)
        chk.check(facts is not None and facts["size"] == (int(round(2 * w)), int(round(2 * h)))
                  and facts["distinct_bytes"] > 16,
                  "demo: %s.png has the PNG signature, twice the SVG's size, and is not blank" % name, str(facts))
        if name == "convergence" and meta:
            rows = meta["rows"]
            want = [(int(s), k, float(hist[key][i])) for i, s in enumerate(hist["sweeps"])
                    for key, k in (("span", "span of Tv - v"), ("value_error_bound", "value error bound"),
                                   ("policy_loss_bound", "policy loss bound")) if hist[key][i] > 0]
            got = [(r["sweeps"], r["series"], r["y"]) for r in rows]
            chk.check(got == want, "demo: convergence.svg carries the solution's /history exactly",
                      "%d rows vs %d" % (len(got), len(want)))
            chk.check(any(t.strip() == "sweeps" for t in texts) and any("log scale" in t for t in texts),
                      "demo: convergence.svg labels its axes")
        if name == "rule_map" and meta:
            bad = 0
            for r in meta["rows"]:
                i, j, k = (labels["storage"].index(r["x"]), labels["inflow"].index(r["facet"]),
                           labels["month"].index(r["y"]))
                s = i + L * (j + J * k)   # factor 0 fastest: storage + L*(inflow + J*month)
                bad += r["action_id"] != policy[s] or abs(r["value"] - value[s]) > 0
                if "action_name" in r:   # shown by value: the name travels beside it
                    bad += r["action_name"] != names[policy[s]]
                else:
                    bad += r["action"] != names[policy[s]]
            chk.check(len(meta["rows"]) == L * J * 12 and bad == 0,
                      "demo: every rule_map.svg cell carries /policy and /value of its state (h5py)",
                      "%d rows, %d mismatches" % (len(meta["rows"]), bad))
        if name == "water_values" and meta:
            # central differences of /value along storage divided by the step
            # of /factor/storage/value, one-sided at the ends, the inflow class
            # fixed at the middle index (as the plot's subtitle says)
            v = value.reshape(12, J, L)[:, J // 2, :]
            S = storage_values
            d = np.empty_like(v)
            d[:, 1:-1] = (v[:, 2:] - v[:, :-2]) / (S[2:] - S[:-2])
            d[:, 0] = (v[:, 1] - v[:, 0]) / (S[1] - S[0])
            d[:, -1] = (v[:, -1] - v[:, -2]) / (S[-1] - S[-2])
            worst, n = 0.0, 0
            for r in meta["rows"]:
                i, k = int(np.argmin(np.abs(S - r["x"]))), labels["month"].index(r["by"])
                err = abs(r["marginal"] - d[k, i]) / max(1e-300, abs(d[k, i]))
                worst = max(worst, err) if err == err else float("inf")
                n += 1
            chk.check(n == 12 * L and worst <= 1e-12,
                      "demo: water_values.svg carries the marginal values recomputed from /value (h5py, numpy)",
                      "%d points, worst relative difference %.2e" % (n, worst))
        if name == "outlook_factors" and meta:
            check_outlook(chk, model, mdp, policy, meta["rows"], None, L, J)
        if name == "outlook_quantities" and meta:
            check_outlook(chk, model, mdp, policy, None, meta["rows"], L, J)
    no_leftovers(chk, work, "demo")
    no_leftovers(chk, figs, "demo figures")

    # the same document from 2 MPI ranks (every command uses all ranks)
    mpiexec = os.environ.get("SLUICE_MPIEXEC") or shutil.which("mpiexec")
    if mpiexec:
        data2 = os.path.join(work, "tamsel-data-np2.json")
        cp = run([mpiexec, "-np", "2", "--oversubscribe", binary, "report", model, sol, "-o",
                  os.path.join(work, "tamsel-np2.html"), "--data", data2], env=env)
        chk.check(cp.returncode == 0, "demo: sluice report under 2 ranks exits 0", cp.stderr[-800:])
        if cp.returncode == 0:
            with open(data2) as f:
                doc2 = json.load(f)
            chk.check(doc2["verify"]["ranks"] == 2, "demo: the 2-rank verification says 2 ranks")
            diffs = []

            def same(a, b, where):
                if isinstance(a, dict) and isinstance(b, dict) and a.keys() == b.keys():
                    for k in a:
                        if where + k not in ("created", "verify.ranks"):
                            same(a[k], b[k], where + k + ".")
                elif isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
                    for i, (x, y) in enumerate(zip(a, b)):
                        same(x, y, where + str(i) + ".")
                elif isinstance(a, float) or isinstance(b, float):
                    if not (isinstance(a, (int, float)) and isinstance(b, (int, float))
                            and abs(a - b) <= 1e-12 * max(abs(a), abs(b))):
                        diffs.append(where)
                elif a != b:
                    diffs.append(where)
            same(doc, doc2, "")
            chk.check(diffs == [], "demo: 1 and 2 ranks give the same document (numbers within 1e-12 relative)",
                      str(diffs[:5]))
    else:
        chk.note("no mpiexec: the 2-rank comparison was not run")

    # ---- a solve stopped early: the page must say NOT certified ----------------
    early = os.path.join(work, "tamsel-early.h5")
    mc.run_sluice(binary, ["solve", model, "-o", early, "--tolerance", "1e-6", "--max-iterations", "3"],
                  expect=(mc.EXIT_STOPPED,))
    ehtml = os.path.join(work, "tamsel-early.html")
    cp = run([binary, "report", model, early, "-o", ehtml], env=env)
    chk.check(cp.returncode == 0, "early: a report of an uncertified solution is still written", cp.stderr[-800:])
    if cp.returncode == 0:
        epage = open_page(rdir, ehtml)
        with h5py.File(early, "r") as f:
            eb = (mc._attr(f, "value_error_bound"), mc._attr(f, "policy_loss_bound"), mc._attr(f, "tolerance"))
        chk.check(eb[0] > eb[2] and epage["verdict"] == "NOT CERTIFIED" and epage["verify"] == "fail",
                  "early: bounds above the tolerance are shown as NOT CERTIFIED, and verify fails too",
                  "%r, %s / %s" % (eb, epage["verdict"], epage["verify"]))
        chk.check(epage["certificate"]["value_error_bound"]["value"] == eb[0],
                  "early: the page shows the solution's own (large) bound")

    # ---- values changed after the solve: the stored bounds still say certified,
    # the independent verify does not, and the badge must follow verify ---------
    tampered = os.path.join(work, "tamsel-tampered.h5")
    shutil.copy(sol, tampered)
    with h5py.File(tampered, "r+") as f:
        v = f["value"][...]
        v[len(v) // 2] += 0.5
        f["value"][...] = v
    thtml = os.path.join(work, "tamsel-tampered.html")
    cp = run([binary, "report", model, tampered, "-o", thtml], env=env)
    if cp.returncode == 0:
        tpage = open_page(rdir, thtml)
        chk.check(tpage["verdict"] == "NOT CERTIFIED" and tpage["verify"] == "fail",
                  "tampered: a value moved by 0.5 kCU after the solve is shown NOT CERTIFIED (verify fails)",
                  "%s / %s" % (tpage["verdict"], tpage["verify"]))
    else:
        chk.check(cp.returncode == 65 and not os.path.exists(thtml),
                  "tampered: refused with 65 and no page", "exit %d: %s" % (cp.returncode, cp.stderr[-400:]))

    # ---- 2. an imported model without factors ------------------------------------
    rnd = mc.random_mdp(20261202, 40, 0.9, actions=(1, 3), successors=(1, 3))
    imodel = mc.import_model(binary, rnd, work, "imported")
    isol = os.path.join(work, "imported-solution.h5")
    mc.run_sluice(binary, ["solve", imodel, "-o", isol, "--tolerance", "1e-8", "--method", "pi"])
    ihtml = os.path.join(work, "imported.html")
    cp = run([binary, "report", imodel, isol, "-o", ihtml], env=env)
    chk.check(cp.returncode == 0, "imported: sluice report exits 0", cp.stderr[-1500:])
    if cp.returncode == 0:
        ipage = open_page(rdir, ihtml)
        check_common(chk, "imported", ipage, isol, imodel)
        chk.check(set(ipage["figures"]) == {"convergence"}, "imported: the convergence plot is drawn",
                  str(sorted(ipage["figures"])))
        f = ipage["figures"].get("convergence", {})
        chk.check(f.get("marks", {}).get("symbol", 0) > 0, "imported: the convergence plot has points")
        chk.check("no named factors" in ipage["omitted"].get("rule_map", ""),
                  "imported: the map is left out because there are no factors",
                  ipage["omitted"].get("rule_map", "missing"))
        chk.check("factors" in ipage["omitted"], "imported: the model facts say there are no factors")

    # ---- 4. the other objectives: average reward and finite horizon --------------------
    check_objectives(chk, binary, work, rdir, env, L, J)
    check_total(chk, binary, work, rdir, env)

    # ---- 3. bad input -------------------------------------------------------------------
    bad = os.path.join(work, "bad")
    os.makedirs(bad)
    out = os.path.join(bad, "r.html")
    # same size, other contents (another capacity): the fingerprints differ
    other, osol = os.path.join(work, "other.h5"), os.path.join(work, "other-solution.h5")
    mc.run_sluice(binary, ["build", os.path.join(ROOT, "examples", "reservoir.c"), "--param", "storage_levels=%d" % L,
                           "--param", "inflow_classes=%d" % J, "--param", "capacity=1100", "-o", other])
    mc.run_sluice(binary, ["solve", other, "-o", osol, "--tolerance", "1e-3"])
    cp = run([binary, "report", model, osol, "-o", out, "--figures", os.path.join(bad, "f")], env=env)
    chk.check(cp.returncode == mc.EXIT_DATAERR and "different model" in cp.stderr and osol in cp.stderr,
              "bad: a solution of another model is refused with 65 naming it",
              "%d %s" % (cp.returncode, cp.stderr[-300:]))
    cp = run([binary, "report", model, isol, "-o", out, "--figures", os.path.join(bad, "f")], env=env)
    chk.check(cp.returncode == mc.EXIT_DATAERR and isol in cp.stderr and "states" in cp.stderr,
              "bad: a solution with another number of states is refused with 65 naming it",
              "%d %s" % (cp.returncode, cp.stderr[-300:]))
    chk.check(os.listdir(bad) == [], "bad: nothing written for the mismatched solution", str(os.listdir(bad)))
    cp = run([binary, "report", model, sol, "-o", os.path.join(bad, "no", "such", "dir", "r.html")], env=env)
    chk.check(cp.returncode == EX_CANTCREAT and "cannot create" in cp.stderr,
              "bad: an unwritable output exits 73 naming it", "%d %s" % (cp.returncode, cp.stderr[-300:]))
    if has_outlook:   # a start outside the model
        cp = run([binary, "report", model, sol, "-o", out, "--start", "storage@%d,inflow@0,month@0" % (L + 5)], env=env)
        chk.check(cp.returncode == mc.EXIT_USAGE and "storage" in cp.stderr,
                  "bad: an outlook start off the grid exits 64 naming the factor",
                  "%d %s" % (cp.returncode, cp.stderr[-300:]))
    # a missing plotting package: a renderer directory without node_modules
    bare = os.path.join(work, "bare-renderer")
    os.makedirs(bare)
    shutil.copy(os.path.join(rdir, "render.mjs"), bare)
    cp = run([binary, "report", model, sol, "-o", out], env=dict(env, SLUICE_REPORT_DIR=bare))
    chk.check(cp.returncode == EX_UNAVAILABLE and "'vega'" in cp.stderr and "npm" in cp.stderr,
              "bad: missing npm packages exit 69 naming the package", "%d %s" % (cp.returncode, cp.stderr[-300:]))
    # ... and the renderer's own check, with every package but the PNG encoder
    os.makedirs(os.path.join(bare, "node_modules"))
    for p in os.listdir(os.path.join(rdir, "node_modules")):
        if p not in ("@resvg", ".package-lock.json"):
            os.symlink(os.path.join(rdir, "node_modules", p), os.path.join(bare, "node_modules", p))
    cp = run(["node", os.path.join(bare, "render.mjs"), data, "-o", out, "--figures", os.path.join(bad, "f")])
    chk.check(cp.returncode == EX_UNAVAILABLE and "@resvg/resvg-js" in cp.stderr,
              "bad: the renderer exits 69 naming a missing package", "%d %s" % (cp.returncode, cp.stderr[-300:]))
    cp = run([binary, "report", model, sol, "-o", out], env=dict(env, SLUICE_NODE=os.path.join(bad, "no-node")))
    chk.check(cp.returncode == EX_UNAVAILABLE and "no-node" in cp.stderr,
              "bad: a missing node program exits 69 naming it", "%d %s" % (cp.returncode, cp.stderr[-300:]))
    # a document the renderer cannot use
    broken = os.path.join(work, "broken.json")
    with open(broken, "w") as f:
        d = dict(doc)
        del d["certificate"]
        json.dump(d, f)
    cp = run(["node", os.path.join(rdir, "render.mjs"), broken, "-o", out])
    chk.check(cp.returncode == mc.EXIT_DATAERR and "certificate" in cp.stderr,
              "bad: a document without a certificate is refused with 65 naming it",
              "%d %s" % (cp.returncode, cp.stderr[-300:]))
    chk.check(os.listdir(bad) == [], "bad: no report or temporary left by any failure", str(os.listdir(bad)))
    no_leftovers(chk, work, "bad")
    chk.finish()


if __name__ == "__main__":
    sys.exit(main())
