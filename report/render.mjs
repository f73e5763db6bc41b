#!/usr/bin/env node
// render.mjs - turn a sluice report-data document (docs/report.md) into one
// self-contained HTML page and, with --figures DIR, one SVG and one PNG per plot.
//
//   node render.mjs DATA.json -o REPORT.html [--figures DIR]
//
// Plots are Vega-Lite specifications compiled to Vega here; the page carries
// the Vega runtime inline (no network access needed to open it) and draws
// the plots with hover tooltips; the standalone SVGs come from Vega's
// headless view and the PNGs from resvg. Exit codes follow sysexits.h:
// 64 usage, 65 bad document, 66 missing input, 69 a package is missing,
// 70 internal error, 73 cannot create output. Nothing is left under an
// output name unless everything was written.
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';

const here = path.dirname(fileURLToPath(import.meta.url));
const EX = { USAGE: 64, DATAERR: 65, NOINPUT: 66, UNAVAILABLE: 69, SOFTWARE: 70, CANTCREAT: 73 };

class Fail extends Error {
  constructor(code, msg) {
    super(msg);
    this.code = code;
  }
}
const fail = (code, msg) => {
  throw new Fail(code, msg);
};

// ---- dependencies: each missing package is named -------------------------
async function need(name) {
  try {
    return await import(name);
  } catch (e) {
    fail(EX.UNAVAILABLE,
      `the npm package '${name}' is not installed in ${path.join(here, 'node_modules')} ` +
      `(${e.code || e.message}); run tools/setup, or 'npm ci' in ${here}`);
  }
}
function needFile(pkg, rel) {
  const p = path.join(here, 'node_modules', pkg, rel);
  if (!fs.existsSync(p))
    fail(EX.UNAVAILABLE, `the npm package '${pkg}' is not installed (${p} is missing); run tools/setup, or 'npm ci' in ${here}`);
  return fs.readFileSync(p, 'utf8');
}

// ---- the document --------------------------------------------------------
const FIGURES = ['convergence', 'rule_map', 'water_values', 'outlook_factors', 'outlook_quantities'];

function check(doc) {
  const need_ = (obj, key, type, where) => {
    const v = obj?.[key];
    const ok = type === 'array' ? Array.isArray(v) : type === 'number' ? typeof v === 'number' && Number.isFinite(v)
      : typeof v === type && v !== null;
    if (!ok) fail(EX.DATAERR, `report data: ${where}${key} is missing or not a${type === 'array' ? 'n' : ''} ${type}`);
    return v;
  };
  if (doc?.sluice_report_data !== 1) fail(EX.DATAERR, 'report data: sluice_report_data is not 1 (not a report-data document of this version)');
  const m = need_(doc, 'model', 'object', '');
  for (const k of ['n_states', 'n_pairs', 'n_transitions', 'discount']) need_(m, k, 'number', 'model.');
  need_(m, 'fingerprint', 'string', 'model.');
  need_(m, 'factors', 'array', 'model.');
  need_(m, 'actions', 'array', 'model.');
  const s = need_(doc, 'solution', 'object', '');
  need_(s, 'method', 'string', 'solution.');
  const c = need_(doc, 'certificate', 'object', '');
  for (const k of ['tolerance', 'value_error_bound', 'policy_loss_bound']) need_(c, k, 'number', 'certificate.');
  need_(c, 'certified', 'boolean', 'certificate.');
  need_(doc, 'caution', 'string', '');
  for (const k of ['history', 'rule_map', 'water_values', 'outlook']) {
    const sec = doc[k];
    if (sec === undefined || sec === null) fail(EX.DATAERR, `report data: section ${k} is missing (give {"omitted": "reason"} to leave it out)`);
    if (sec.omitted !== undefined && typeof sec.omitted !== 'string') fail(EX.DATAERR, `report data: ${k}.omitted must be a string`);
  }
  const h = doc.history;
  if (!h.omitted) {
    const n = need_(h, 'sweeps', 'array', 'history.').length;
    for (const k of ['seconds', 'span', 'value_error_bound', 'policy_loss_bound'])
      if (need_(h, k, 'array', 'history.').length !== n) fail(EX.DATAERR, `report data: history.${k} has a different length than history.sweeps`);
  }
  const r = doc.rule_map;
  if (!r.omitted) {
    const nx = need_(need_(r, 'x', 'object', 'rule_map.'), 'labels', 'array', 'rule_map.x.').length;
    const ny = need_(need_(r, 'y', 'object', 'rule_map.'), 'labels', 'array', 'rule_map.y.').length;
    const nf = r.facet ? need_(r.facet, 'labels', 'array', 'rule_map.facet.').length : 1;
    if (need_(r, 'action', 'array', 'rule_map.').length !== nx * ny * nf)
      fail(EX.DATAERR, `report data: rule_map.action has ${r.action.length} entries, expected ${nx}*${ny}*${nf}`);
  }
  return doc;
}

// ---- words and numbers ---------------------------------------------------
const esc = (s) => String(s ?? '').replace(/[&<>"']/g, (ch) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[ch]);
const sci = (x, d = 2) => (x === null || x === undefined || !Number.isFinite(x) ? 'n/a' : x.toExponential(d));
const num = (x) => (x === null || x === undefined ? 'n/a' : Number.isInteger(x) ? x.toLocaleString('en-US') : String(+x.toPrecision(6)));
// A number shown in the page keeps its full value in data-value so a test
// (or a reviewer's script) can compare it with the file it came from.
const cert = (key, x, d = 2) => `<span class="num" data-cert="${esc(key)}" data-value="${esc(JSON.stringify(x))}">${esc(sci(x, d))}</span>`;
const certCount = (key, x) => `<span class="num" data-cert="${esc(key)}" data-value="${esc(JSON.stringify(x))}">${esc(num(x))}</span>`;
const unitOf = (u, fallback) => (u && u.length ? u : fallback);

// The finite, total and average objectives (certificate.objective present):
// their own certificate in words; the discounted page is untouched.
function objectiveWords(doc) {
  const c = doc.certificate;
  const ru = esc(unitOf(doc.model.reward_unit, 'reward units'));
  const per = doc.model.period_unit ? ` per ${esc(doc.model.period_unit)}` : ' per period';
  const what = esc(doc.model.action_noun || 'policy');
  const tol = `against a tolerance of ${cert('tolerance', c.tolerance, 1)}`;
  if (c.objective === 'average') {
    return `The optimal gain (long-run average reward) lies between ${cert('gain_lower', c.gain_lower, 9)} and ` +
      `${cert('gain_upper', c.gain_upper, 9)} ${ru}${per} (the smallest and largest change T h − h over the states); ` +
      `the stored gain ${cert('gain', c.gain, 9)} ${ru}${per} is within ${cert('value_error_bound', c.value_error_bound)} of every gain those bounds allow, ` +
      `and the ${what}'s gain is within ${cert('policy_loss_bound', c.policy_loss_bound)} ${ru}${per} of the optimal gain, ${tol} ${ru}${per}. ` +
      `The stored values are the bias (relative values, defined up to a constant); their span, largest minus smallest, is ${cert('bias_span', c.bias_span, 4)} ${ru}.`;
  }
  if (c.objective === 'total') {
    return `Total reward until absorption, undiscounted: ${certCount('n_absorbing', c.n_absorbing)} absorbing states; under every policy the expected number of steps ` +
      `before absorption is at most ${cert('steps_bound_max', c.steps_bound_max, 4)} in any state. ` +
      `Every value is within ${cert('value_error_bound', c.value_error_bound)} ${ru} of the optimal total; ` +
      `the ${what} loses at most ${cert('policy_loss_bound', c.policy_loss_bound)} ${ru} in any state, ${tol} ${ru}.`;
  }
  return `Finite horizon of ${certCount('horizon', c.horizon)} stages, solved backwards from the terminal values ` +
    `(source: <span id="terminal">${esc(c.terminal)}</span>), exact up to roundoff: every first-stage value is within ` +
    `${cert('value_error_bound', c.value_error_bound)} ${ru} of the optimum (the floating-point allowance summed over the stages is ${cert('roundoff_bound', c.roundoff_bound)} ${ru}), ` +
    `and the stage-by-stage ${what} loses at most ${cert('policy_loss_bound', c.policy_loss_bound)} ${ru} in any state, ${tol} ${ru}.`;
}

function certificateWords(doc) {
  const c = doc.certificate;
  if (c.objective) return objectiveWords(doc);
  const ru = unitOf(doc.model.reward_unit, 'reward units');
  const rel = c.value_error_relative;
  const relWords = rel === null || rel === undefined
    ? 'the smallest value is zero, so no relative figure'
    : `${cert('value_error_relative', rel, 1)} of the smallest value in magnitude`;
  const what = doc.model.action_noun || 'policy';
  return `Every value is within ${cert('value_error_bound', c.value_error_bound)} ${esc(ru)} of the optimum (${relWords}); ` +
    `the ${esc(what)} loses at most ${cert('policy_loss_bound', c.policy_loss_bound)} ${esc(ru)} in any state, ` +
    `against a tolerance of ${cert('tolerance', c.tolerance, 1)} ${esc(ru)}.`;
}

// ---- plots (Vega-Lite) ---------------------------------------------------
const FONT = 'DejaVu Sans, Helvetica, Arial, sans-serif';
const config = { font: FONT, view: { stroke: '#ccc' }, axis: { labelFontSize: 11, titleFontSize: 12 }, legend: { labelFontSize: 11 } };

function convergenceSpec(doc) {
  const h = doc.history;
  const ru = unitOf(doc.model.reward_unit, 'reward units');
  const series = [['span', 'span of Tv - v'], ['value_error_bound', 'value error bound'], ['policy_loss_bound', 'policy loss bound']];
  const rows = [];
  for (let i = 0; i < h.sweeps.length; i++)
    for (const [k, label] of series) {
      const y = h[k][i];
      if (typeof y === 'number' && y > 0) rows.push({ sweeps: h.sweeps[i], seconds: h.seconds[i], series: label, y });
    }
  const tol = doc.certificate.tolerance;
  const panel = (xf, xt) => ({
    width: 330, height: 240,
    layer: [
      { mark: { type: 'line', point: { size: 18 } },
        encoding: {
          x: { field: xf, type: 'quantitative', title: xt },
          y: { field: 'y', type: 'quantitative', scale: { type: 'log' }, axis: { format: '.0e' }, title: `${ru} (log scale)` },
          color: { field: 'series', type: 'nominal', title: null, sort: series.map((s) => s[1]) },
          tooltip: [{ field: 'series' }, { field: 'sweeps', title: 'sweeps' }, { field: 'seconds', format: '.3f', title: 'seconds' },
            { field: 'y', format: '.3e', title: ru }] } },
      { data: { values: [{ tol }] }, mark: { type: 'rule', strokeDash: [4, 3], color: '#555' },
        encoding: { y: { field: 'tol', type: 'quantitative' }, tooltip: [{ field: 'tol', format: '.1e', title: `tolerance (${ru})` }] } },
    ],
  });
  return {
    rows,
    spec: {
      title: { text: 'Convergence: span and certified bounds', subtitle: `dashed: tolerance ${sci(tol, 1)} ${ru}` },
      data: { values: rows }, config,
      hconcat: [panel('sweeps', 'sweeps'), panel('seconds', 'seconds since start')],
    },
  };
}

// An action is shown by its value (with the unit in the legend title) when
// the model gives one, else by its name.
const actionLabel = (a, id) => (a && typeof a.value === 'number' ? num(a.value) : a?.name ?? `action ${id}`);

function ruleMapSpec(doc) {
  const r = doc.rule_map;
  const m = doc.model;
  const acts = new Map(m.actions.map((a) => [a.id, a]));
  const au = m.action_unit || '';
  const nx = r.x.labels.length, ny = r.y.labels.length, nf = r.facet ? r.facet.labels.length : 1;
  const rows = [];
  for (let f = 0; f < nf; f++)
    for (let y = 0; y < ny; y++)
      for (let x = 0; x < nx; x++) {
        const k = (f * ny + y) * nx + x;
        const id = r.action[k];
        const a = acts.get(id);
        const row = { x: String(r.x.labels[x]), y: String(r.y.labels[y]), action_id: id, action: actionLabel(a, id) };
        if (a && typeof a.value === 'number') {
          row.action_value = a.value;
          row.action_name = a.name;
        }
        if (r.facet) row.facet = String(r.facet.labels[f]);
        if (r.value) row.value = r.value[k];
        rows.push(row);
      }
  // legend in the order of the actions' values when they have values, else of their ids
  const key = (id) => { const v = acts.get(id)?.value; return typeof v === 'number' ? v : id; };
  const used = [...new Set(r.action)].sort((p, q) => key(p) - key(q) || p - q);
  const domain = used.map((id) => actionLabel(acts.get(id), id));
  const withUnit = (ax) => (ax.unit ? `${ax.factor} (${ax.unit})` : ax.factor);
  const tooltip = [{ field: 'x', title: withUnit(r.x) }, { field: 'y', title: withUnit(r.y) }];
  if (r.facet) tooltip.push({ field: 'facet', title: withUnit(r.facet) });
  tooltip.push({ field: 'action', title: au ? `action (${au})` : 'action' });
  if (rows.some((w) => 'action_value' in w)) tooltip.push({ field: 'action_name', title: 'action name' });
  if (r.value) tooltip.push({ field: 'value', format: '.6g', title: `value (${unitOf(m.reward_unit, 'reward units')})` });
  const cellW = Math.max(3, Math.min(14, Math.floor(260 / nx)));
  const cellH = Math.max(6, Math.min(16, Math.floor(200 / ny)));
  const inner = {
    mark: { type: 'rect' },
    width: cellW * nx, height: cellH * ny,
    encoding: {
      x: { field: 'x', type: 'ordinal', sort: r.x.labels.map(String), title: withUnit(r.x),
        axis: { labelOverlap: 'parity', labelAngle: 0, labelExpr: "isValid(toNumber(datum.value)) ? format(toNumber(datum.value), '.4~g') : datum.value" } },
      y: { field: 'y', type: 'ordinal', sort: r.y.labels.map(String), title: withUnit(r.y) },
      color: { field: 'action', type: 'ordinal', scale: { domain, scheme: 'viridis' }, title: au ? `action (${au})` : 'action',
        legend: { columns: domain.length > 12 ? 2 : 1 } },
      tooltip,
    },
  };
  const fixed = (r.fixed || []).map((f) => `${f.factor} = ${f.label}`).join(', ');
  const sampled = [r.x, r.y, r.facet].filter((a) => a && a.sampled).map((a) => `${a.factor}: ${a.labels.length} of ${a.size} values shown`).join('; ');
  const subtitle = [fixed && `fixed: ${fixed}`, sampled].filter(Boolean).join(' | ') || undefined;
  const title = { text: `Rule: action by ${r.x.factor} and ${r.y.factor}${r.facet ? `, one panel per ${r.facet.factor}` : ''}`, subtitle };
  const spec = r.facet
    ? { title, data: { values: rows }, config, facet: { field: 'facet', type: 'ordinal', sort: r.facet.labels.map(String), title: withUnit(r.facet) },
      columns: Math.max(1, Math.min(nf, Math.floor(900 / (cellW * nx + 60)))), spec: inner }
    : { title, data: { values: rows }, config, ...inner };
  return { rows, spec };
}

function waterValuesSpec(doc) {
  const w = doc.water_values;
  const rows = [];
  for (const s of w.series)
    for (let i = 0; i < w.x.length; i++)
      if (s.values[i] !== null && s.values[i] !== undefined) rows.push({ x: w.x[i], by: String(s.label), marginal: s.values[i] });
  const xt = w.x_unit ? `${w.factor} (${w.x_unit})` : w.factor;
  const yt = w.unit ? `marginal value (${w.unit})` : 'marginal value';
  return {
    rows,
    spec: {
      title: { text: `Water values: marginal value of ${w.factor}`, subtitle: w.note || undefined },
      data: { values: rows }, config, width: 520, height: 280,
      mark: { type: 'line', point: { size: 12 } },
      encoding: {
        x: { field: 'x', type: 'quantitative', title: xt },
        y: { field: 'marginal', type: 'quantitative', title: yt },
        color: { field: 'by', type: 'ordinal', sort: w.series.map((s) => String(s.label)), title: w.by || null, scale: { scheme: 'turbo' } },
        tooltip: [{ field: 'by', title: w.by || 'series' }, { field: 'x', title: xt }, { field: 'marginal', format: '.4g', title: yt }],
      },
    },
  };
}

function outlookFactorsSpec(doc) {
  const o = doc.outlook;
  const names = Object.keys(o.stages[0]?.factors || {});
  if (names.length === 0) return null;
  const rows = [];
  for (const st of o.stages)
    for (const n of names) {
      const f = st.factors[n];
      rows.push({ stage: st.stage, factor: n, ...f });
    }
  const units = o.factor_units || {};
  const tt = [{ field: 'factor' }, { field: 'stage' }, { field: 'p5', format: '.4g' }, { field: 'p25', format: '.4g' },
    { field: 'p50', format: '.4g', title: 'median' }, { field: 'p75', format: '.4g' }, { field: 'p95', format: '.4g' }, { field: 'mean', format: '.4g' }];
  const layer = [
    { mark: { type: 'area', opacity: 0.25, color: '#2b6cb0' }, encoding: { x: { field: 'stage', type: 'quantitative' }, y: { field: 'p5', type: 'quantitative' }, y2: { field: 'p95' }, tooltip: tt } },
    { mark: { type: 'area', opacity: 0.45, color: '#2b6cb0' }, encoding: { x: { field: 'stage', type: 'quantitative' }, y: { field: 'p25', type: 'quantitative' }, y2: { field: 'p75' }, tooltip: tt } },
    { mark: { type: 'line', color: '#1a365d' }, encoding: { x: { field: 'stage', type: 'quantitative', title: `stage (${o.period_unit || 'period'})` }, y: { field: 'p50', type: 'quantitative', title: null }, tooltip: tt } },
    { mark: { type: 'line', color: '#c05621', strokeDash: [4, 2] }, encoding: { x: { field: 'stage', type: 'quantitative' }, y: { field: 'mean', type: 'quantitative' }, tooltip: tt } },
  ];
  return {
    rows,
    spec: {
      title: { text: 'Outlook: distribution of each numeric factor by stage', subtitle: `bands 5-95% and 25-75%, line median, dashed mean; start ${o.start_label ?? o.start}` },
      data: { values: rows }, config,
      facet: { row: { field: 'factor', type: 'nominal', title: null, header: { labelExpr: `datum.value + ({${names.map((n) => `${JSON.stringify(n)}: ${JSON.stringify(units[n] ? ` (${units[n]})` : '')}`).join(',')}}[datum.value] || '')` } } },
      resolve: { scale: { y: 'independent' } },
      spec: { width: 520, height: 170, layer },
    },
  };
}

function outlookQuantitiesSpec(doc) {
  const o = doc.outlook;
  const names = Object.keys(o.stages[0]?.quantities || {});
  if (names.length === 0) return null;
  const units = o.quantity_units || {};
  const rows = [];
  for (const st of o.stages)
    for (const n of names) rows.push({ stage: st.stage, quantity: units[n] ? `${n} (${units[n]})` : n, mean: st.quantities[n].mean, p_positive: st.quantities[n].p_positive });
  return {
    rows,
    spec: {
      title: { text: 'Outlook: expected quantities by stage', subtitle: 'expected value per stage; hover for the probability that it is positive' },
      data: { values: rows }, config,
      facet: { row: { field: 'quantity', type: 'nominal', title: null } },
      resolve: { scale: { y: 'independent' } },
      spec: { width: 520, height: 120, mark: { type: 'line', point: { size: 10 } },
        encoding: { x: { field: 'stage', type: 'quantitative', title: `stage (${o.period_unit || 'period'})` },
          y: { field: 'mean', type: 'quantitative', title: null },
          tooltip: [{ field: 'quantity' }, { field: 'stage' }, { field: 'mean', format: '.4g', title: 'expected' }, { field: 'p_positive', format: '.3f', title: 'P(> 0)' }] } },
    },
  };
}

function buildFigures(doc) {
  const figs = {};
  const reasons = {};
  const put = (name, sectionKey, fn) => {
    const sec = doc[sectionKey];
    if (sec.omitted) {
      reasons[name] = sec.omitted;
      return;
    }
    const f = fn(doc);
    if (f === null) reasons[name] = sectionKey === 'outlook' ? `the outlook has no ${name === 'outlook_factors' ? 'numeric factors' : 'outcome quantities'} to plot` : 'nothing to plot';
    else if (f.rows.length === 0) reasons[name] = 'no plottable points (every value is zero or missing)';
    else figs[name] = f;
  };
  put('convergence', 'history', convergenceSpec);
  put('rule_map', 'rule_map', ruleMapSpec);
  put('water_values', 'water_values', waterValuesSpec);
  put('outlook_factors', 'outlook', outlookFactorsSpec);
  put('outlook_quantities', 'outlook', outlookQuantitiesSpec);
  return { figs, reasons };
}

// ---- page ----------------------------------------------------------------
const CSS = `
body{font-family:${FONT};max-width:1100px;margin:1.2em auto;padding:0 1em;color:#1a202c;line-height:1.45}
h1{font-size:1.5em;margin:.2em 0} h2{font-size:1.2em;border-bottom:1px solid #ddd;margin-top:1.6em}
.verdict{display:inline-block;font-weight:bold;padding:.25em .7em;border-radius:4px;color:#fff;font-size:1.1em}
.pass{background:#276749}.failv{background:#c53030}
.cert{font-size:1.08em;background:#f7fafc;border-left:4px solid #2b6cb0;padding:.6em .9em;margin:.6em 0}
.caution{background:#fffaf0;border:1px solid #dd6b20;padding:.6em .9em;margin:.8em 0}
table{border-collapse:collapse;margin:.4em 0;font-size:.93em} td,th{border:1px solid #e2e8f0;padding:.2em .6em;text-align:left;vertical-align:top}
th{background:#edf2f7} .num{font-variant-numeric:tabular-nums}
.omitted{color:#4a5568;font-style:italic} figure{margin:1em 0} .muted{color:#718096;font-size:.9em}
.grid{display:grid;grid-template-columns:1fr 1fr;gap:1em} @media(max-width:800px){.grid{grid-template-columns:1fr}}
`;

function table(rows, head) {
  return `<table>${head ? `<tr>${head.map((h) => `<th>${esc(h)}</th>`).join('')}</tr>` : ''}${rows
    .map((r) => `<tr>${r.map((c, i) => (i === 0 && !head ? `<th>${c}</th>` : `<td>${c}</td>`)).join('')}</tr>`).join('')}</table>`;
}

function objectiveLine(m, c, ru) {
  const per = m.period_unit ? ` per ${esc(m.period_unit)}` : '';
  if (c.objective === 'average') return `average reward per period (the gain; the model's discount ${esc(num(m.discount))} is not used)${per}; reward in ${esc(ru)}`;
  if (c.objective === 'total') return `total reward until absorption (undiscounted)${per}; reward in ${esc(ru)}`;
  if (c.objective === 'finite') return `finite horizon of ${esc(num(c.horizon))} stages, discount ${esc(num(m.discount))}${per}; reward in ${esc(ru)}`;
  return `${esc(m.objective || 'discounted')}, discount ${esc(num(m.discount))}${per}; reward in ${esc(ru)}`;
}

function page(doc, figs, reasons, vegaJs, tooltipJs) {
  const m = doc.model, s = doc.solution, c = doc.certificate, v = doc.verify;
  const ru = unitOf(m.reward_unit, 'reward units');
  const title = doc.title || `sluice report: ${m.name || m.path}`;
  // the badge needs the solution's own certificate and, when it was run, the
  // independent check: a file whose values were changed after the solve keeps
  // its stored bounds, and only the recomputation shows they no longer hold
  const certified = c.certified && (!v || v.omitted !== undefined || v.certified === true);
  const verdict = certified
    ? `<span class="verdict pass" id="verdict" data-certified="true">CERTIFIED</span>`
    : `<span class="verdict failv" id="verdict" data-certified="false">NOT CERTIFIED</span>`;
  let verifyHtml;
  if (!v || v.omitted) verifyHtml = `<p class="omitted" data-omitted="verify">Independent check left out: ${esc(v?.omitted || 'not run')}</p>`;
  else if (v.objective) {
    const how = v.objective === 'average'
      ? `optimal gain between ${cert('verify_gain_lower', v.gain_lower, 9)} and ${cert('verify_gain_upper', v.gain_upper, 9)} ${esc(ru)} (min and max of T h − h), ` +
        `stored gain within ${cert('verify_value_error_bound', v.value_error_bound)} of them, policy gain within ${cert('verify_policy_loss_bound', v.policy_loss_bound)} of optimal`
      : `${v.objective === 'finite' ? `${esc(num(v.horizon))} stages rechecked one by one, terminal values ${v.terminal_rechecked ? 'compared with their source' : `taken from ${esc(v.terminal)} and not rechecked`}; `
        : `expected steps to absorption at most ${cert('verify_steps_bound_max', v.steps_bound_max, 4)} under every policy; `}` +
        `value bound ${cert('verify_value_error_bound', v.value_error_bound)} ${esc(ru)}, policy bound ${cert('verify_policy_loss_bound', v.policy_loss_bound)} ${esc(ru)}`;
    verifyHtml = `<p id="verify">Recomputed independently by <code>sluice verify</code> (objective ${esc(v.objective)}) from the model and the stored values and policy${v.ranks ? ` on ${v.ranks} rank(s)` : ''}: ` +
      `${how} (${v.objective === 'average' ? 'T h − h' : 'residual'} from ${cert('verify_residual_min', v.residual_min, 9)} to ${cert('verify_residual_max', v.residual_max, 9)}): ` +
      `<b data-verify="${v.certified ? 'pass' : 'fail'}">${v.certified ? 'certified' : 'NOT certified'}</b> at tolerance ${sci(v.tolerance, 1)}.</p>`;
  } else
    verifyHtml = `<p id="verify">Recomputed independently by <code>sluice verify</code> from the model and the stored values and policy${v.ranks ? ` on ${v.ranks} rank(s)` : ''}: ` +
      `value bound ${cert('verify_value_error_bound', v.value_error_bound)} ${esc(ru)}, policy bound ${cert('verify_policy_loss_bound', v.policy_loss_bound)} ${esc(ru)} ` +
      `(residual sup ${cert('verify_residual_sup', v.residual_sup)}, span ${cert('verify_residual_span', v.residual_span)}): ` +
      `<b data-verify="${v.certified ? 'pass' : 'fail'}">${v.certified ? 'certified' : 'NOT certified'}</b> at tolerance ${sci(v.tolerance, 1)}.</p>`;
  const params = (m.parameters || []).map((p) => [esc(p.name), `<span class="num">${esc(num(p.value))}</span>`, esc(p.unit || '')]);
  const factors = m.factors.map((f) => [esc(f.name), num(f.size), f.stage ? 'stage (cyclic)' : '', esc(f.unit || ''),
    esc(f.labels ? `${f.labels.slice(0, 4).join(', ')}${f.labels.length > 4 ? ', ...' : ''}` : f.values ? `${num(f.values[0])} .. ${num(f.values[f.values.length - 1])}` : 'indices only')]);
  const actions = m.actions.map((a) => [num(a.id), esc(a.name ?? ''), a.value === null || a.value === undefined ? '' : esc(num(a.value)), a.states_available === undefined ? '' : num(a.states_available)]);
  const quantities = (m.quantities || []).map((q) => [esc(q.name), esc(q.unit || '')]);
  const summary = table([
    ['model', `${esc(m.path || '')} ${m.name ? `(generator <b>${esc(m.name)}</b>${m.source ? `, ${esc(m.source)}` : ''})` : m.source ? `(from ${esc(m.source)})` : ''}`],
    ['fingerprint', `<code id="fingerprint">${esc(m.fingerprint)}</code>`],
    ['size', `${num(m.n_states)} states, ${num(m.n_pairs)} state-action pairs, ${num(m.n_transitions)} transitions`],
    ['objective', objectiveLine(m, c, ru)],
    ['solution', `${esc(s.path || '')}: method <b>${esc(s.method)}</b>${s.order ? ` (order ${esc(s.order)})` : ''}, ` +
      `${s.ranks ? `${num(s.ranks)} rank(s)` : 'rank count not recorded in the solution file'}, ${num(s.iterations)} iterations, ${num(s.sweeps)} sweeps, ${esc(num(s.seconds))} s; ` +
      `${s.converged ? 'stopped certified' : 'stopped before certifying'}`],
    ['values', `from ${esc(num(s.value_min))} to ${esc(num(s.value_max))} ${esc(ru)}`],
    c.objective === 'average'
      ? ['residual', `T h − h from ${cert('gain_lower_file', c.gain_lower, 9)} to ${cert('gain_upper_file', c.gain_upper, 9)}, span = ${cert('residual_span', c.residual_span)} ${esc(ru)}`]
      : ['residual', `sup |Tv - v| = ${cert('residual_sup', c.residual_sup)}, span = ${cert('residual_span', c.residual_span)} ${esc(ru)}`],
  ]);
  const figHtml = (name, heading, blurb) => {
    if (figs[name])
      return `<h2>${esc(heading)}</h2><p class="muted">${blurb}</p><figure id="fig-${name}" data-figure="${name}"><div class="view"></div></figure>`;
    return `<h2>${esc(heading)}</h2><p class="omitted" data-omitted="${name}">Left out: ${esc(reasons[name] || 'no data')}.</p>`;
  };
  const specs = {};
  for (const [k, f] of Object.entries(figs)) specs[k] = f.vega;
  const dataJson = JSON.stringify(specs).replace(/</g, '\\u003c');
  // vega-tooltip is shipped as an ES module importing three helpers from
  // vega-util, which the Vega bundle already exposes on the global `vega`.
  const tooltipModule = tooltipJs.replace(/^import\s*\{([^}]*)\}\s*from\s*'vega-util';/m, 'const {$1} = globalThis.vega;');
  if (tooltipModule === tooltipJs) fail(EX.SOFTWARE, "vega-tooltip's module header changed; report/render.mjs must be updated");
  const inline = (js) => js.replace(/<\/(script)/gi, '<\\/$1');
  return `<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="${esc(doc.generated_by || 'sluice')}">
<title>${esc(title)}</title><style>${CSS}</style></head><body>
<h1>${esc(title)}</h1>
<p>${verdict} <span class="muted">${esc(doc.created || '')}</span></p>
<p class="cert" id="certificate">${certificateWords(doc)}</p>
${verifyHtml}
<div class="caution" id="caution"><b>Caution.</b> ${esc(doc.caution)}</div>
<h2>Summary</h2>${summary}
${figHtml('convergence', 'Convergence', 'Span of the Bellman residual and the two certified bounds at every check, against sweeps and against seconds. Log scale; the dashed line is the tolerance.')}
${figHtml('rule_map', 'The rule', 'The action the solution chooses in each state. Hover a cell for its labels, the action and the value.')}
${figHtml('water_values', 'Water values', 'Marginal value of one unit of the numeric factor, by the other factor.')}
${figHtml('outlook_factors', 'Outlook: state', 'Exact distribution of each numeric factor by stage under the policy, from the start given.')}
${figHtml('outlook_quantities', 'Outlook: quantities', 'Expected one-period outcome quantities by stage under the policy.')}
<h2>Model facts</h2>
<div class="grid"><div><h3>Factors</h3>${m.factors.length ? table(factors, ['factor', 'size', 'kind', 'unit', 'values']) : '<p class="omitted" data-omitted="factors">The model has no named factors: states are numbers only.</p>'}
<h3>Outcome quantities</h3>${quantities.length ? table(quantities, ['quantity', 'unit']) : '<p class="omitted" data-omitted="quantities">The model reports no outcome quantities.</p>'}
${params.length ? `<h3>Parameters</h3>${table(params, ['parameter', 'value', 'unit'])}` : ''}</div>
<div><h3>Actions and availability</h3>${table(actions, ['id', 'name', m.action_unit ? `value (${esc(m.action_unit)})` : 'value', 'states where available'])}
${m.actions_per_state ? `<p>Actions per state: ${num(m.actions_per_state.min)} to ${num(m.actions_per_state.max)} (mean ${esc(num(m.actions_per_state.mean))}).</p>` : ''}</div></div>
<p class="muted">Made by ${esc(doc.generated_by || 'sluice')}. Plots drawn with Vega; this page needs no network access.</p>
<script>${inline(vegaJs)}</script>
<script type="module">
${inline(tooltipModule)}
const specs = ${dataJson};
const handler = new Handler({ theme: 'light' });
const views = {};
window.sluiceReport = { views, ready: (async () => {
  for (const [name, spec] of Object.entries(specs)) {
    const el = document.querySelector('#fig-' + name + ' .view');
    const view = new vega.View(vega.parse(spec), { renderer: 'svg', container: el, hover: true });
    view.tooltip(handler.call);
    await view.runAsync();
    views[name] = view;
  }
  document.body.dataset.rendered = Object.keys(views).join(' ');
  return Object.keys(views);
})() };
</script>
</body></html>
`;
}

// ---- files (atomic) --------------------------------------------------------
function writeAtomic(file, content) {
  const dir = path.dirname(path.resolve(file));
  const tmp = path.join(dir, `.${path.basename(file)}.${process.pid}.partial`);
  try {
    fs.writeFileSync(tmp, content);
    const fd = fs.openSync(tmp, 'r');
    fs.fsyncSync(fd);
    fs.closeSync(fd);
  } catch (e) {
    try { fs.unlinkSync(tmp); } catch { /* not created */ }
    fail(EX.CANTCREAT, `${file}: cannot create: ${e.message}`);
  }
  return tmp;
}

async function main(argv) {
  let input = null, output = null, figdir = null;
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    if (a === '-o' || a === '--output') output = argv[++i];
    else if (a === '--figures') figdir = argv[++i];
    else if (a === '-h' || a === '--help') {
      process.stdout.write('usage: node render.mjs DATA.json -o REPORT.html [--figures DIR]\n');
      return 0;
    } else if (a.startsWith('-')) fail(EX.USAGE, `unknown option '${a}'`);
    else if (input === null) input = a;
    else fail(EX.USAGE, `unexpected argument '${a}'`);
  }
  if (!input || !output) fail(EX.USAGE, 'usage: node render.mjs DATA.json -o REPORT.html [--figures DIR]');
  if (output === undefined || figdir === undefined) fail(EX.USAGE, 'an option needs a value');
  let text;
  try {
    text = fs.readFileSync(input, 'utf8');
  } catch (e) {
    fail(EX.NOINPUT, `${input}: cannot read: ${e.message}`);
  }
  let doc;
  try {
    doc = JSON.parse(text);
  } catch (e) {
    fail(EX.DATAERR, `${input}: not JSON: ${e.message}`);
  }
  check(doc);

  const vega = await need('vega');
  const vl = await need('vega-lite');
  const vegaJs = needFile('vega', 'build/vega.min.js');
  const tooltipJs = needFile('vega-tooltip', 'build/index.js');
  const { Resvg } = figdir ? await need('@resvg/resvg-js') : { Resvg: null };

  const { figs, reasons } = buildFigures(doc);
  for (const f of Object.values(figs)) f.vega = vl.compile(f.spec).spec;

  // Render everything in memory first; write only when all succeeded.
  const outputs = [];
  if (figdir) {
    for (const [name, f] of Object.entries(figs)) {
      const view = new vega.View(vega.parse(f.vega), { renderer: 'none' });
      let svg = await view.toSVG();
      view.finalize();
      // The plotted rows travel inside the SVG, so a reader can check them.
      const meta = `<metadata id="sluice-data">${esc(JSON.stringify({ figure: name, fingerprint: doc.model.fingerprint, rows: f.rows }))}</metadata>`;
      svg = svg.replace(/^(<svg[^>]*>)/, `$1<title>${esc(f.spec.title?.text || name)}</title>${meta}`);
      const png = new Resvg(svg, { fitTo: { mode: 'zoom', value: 2 }, background: 'white',
        font: { loadSystemFonts: true, defaultFontFamily: 'DejaVu Sans' } }).render().asPng();
      outputs.push([path.join(figdir, `${name}.svg`), svg], [path.join(figdir, `${name}.png`), png]);
    }
    if (Object.keys(reasons).length)
      outputs.push([path.join(figdir, 'omitted.txt'), Object.entries(reasons).map(([k, r]) => `${k}: ${r}\n`).join('')]);
  }
  const html = page(doc, figs, reasons, vegaJs, tooltipJs);
  outputs.push([output, html]);

  if (figdir) {
    try {
      fs.mkdirSync(figdir, { recursive: true });
    } catch (e) {
      fail(EX.CANTCREAT, `${figdir}: cannot create the figures directory: ${e.message}`);
    }
  }
  const temps = [];
  try {
    for (const [file, content] of outputs) temps.push([writeAtomic(file, content), file]);
  } catch (e) {
    for (const [t] of temps) fs.rmSync(t, { force: true });
    throw e;
  }
  const done = [];
  try {
    for (const [t, file] of temps) {
      fs.renameSync(t, file); // the page comes last: it exists only if every figure does
      done.push(file);
    }
  } catch (e) {
    for (const [t] of temps) fs.rmSync(t, { force: true });
    for (const f of done) fs.rmSync(f, { force: true });
    fail(EX.CANTCREAT, `cannot move the report into place: ${e.message}`);
  }
  process.stderr.write(`report: wrote ${output}${figdir ? ` and ${Object.keys(figs).length * 2} figure files in ${figdir}` : ''}` +
    `${Object.keys(reasons).length ? ` (left out: ${Object.keys(reasons).join(', ')})` : ''}\n`);
  return 0;
}

main(process.argv.slice(2)).then(
  (rc) => process.exit(rc),
  (e) => {
    if (e instanceof Fail) {
      process.stderr.write(`sluice report: ${e.message}\n`);
      process.exit(e.code);
    }
    process.stderr.write(`sluice report: internal error: ${e.stack || e}\n`);
    process.exit(EX.SOFTWARE);
  });
