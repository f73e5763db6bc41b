// check_page.mjs - open a sluice report in Debian's headless Chromium (driven
// by playwright-core) and print, as one JSON document, what a test needs to
// judge it: console errors, network requests other than the page itself,
// which figures were drawn and how many marks each holds, the certificate
// numbers shown, the sections left out and why, whether hovering a map cell
// shows a tooltip. With a third argument, a screenshot of the first screen.
//
//   node check_page.mjs PLAYWRIGHT_DIR REPORT.html [SCREENSHOT.png]
//
// PLAYWRIGHT_DIR is the report/ directory whose node_modules holds
// playwright-core. The browser is $SLUICE_CHROMIUM or /usr/bin/chromium.
import path from 'node:path';
import { createRequire } from 'node:module';

const [dir, page_, shot] = process.argv.slice(2);
if (!dir || !page_) {
  process.stderr.write('usage: node check_page.mjs REPORT_DIR REPORT.html [SCREENSHOT.png]\n');
  process.exit(64);
}
const require = createRequire(path.join(path.resolve(dir), 'package.json'));
let chromium;
try {
  ({ chromium } = require('playwright-core'));
} catch (e) {
  process.stderr.write(`check_page: the npm package 'playwright-core' is missing in ${dir}/node_modules (${e.code})\n`);
  process.exit(69);
}
const exe = process.env.SLUICE_CHROMIUM || '/usr/bin/chromium';
const browser = await chromium.launch({ executablePath: exe, headless: true, args: ['--no-sandbox', '--disable-gpu'] });
const out = { console_errors: [], page_errors: [], external_requests: [] };
try {
  const ctx = await browser.newContext({ viewport: { width: 1280, height: 900 }, offline: true });
  const page = await ctx.newPage();
  page.on('console', (m) => {
    if (m.type() === 'error' || m.type() === 'warning') out.console_errors.push(`${m.type()}: ${m.text()}`);
  });
  page.on('pageerror', (e) => out.page_errors.push(String(e)));
  page.on('request', (r) => {
    const u = r.url();
    if (!u.startsWith('file:') && !u.startsWith('data:') && !u.startsWith('about:')) out.external_requests.push(u);
  });
  await page.goto('file://' + path.resolve(page_), { waitUntil: 'load' });
  out.rendered = await page.evaluate(async () => (window.sluiceReport ? await window.sluiceReport.ready : null));
  Object.assign(out, await page.evaluate(() => {
    const figs = {};
    for (const f of document.querySelectorAll('figure[data-figure]')) {
      const svg = f.querySelector('svg');
      const marks = {};
      for (const kind of ['rect', 'line', 'symbol', 'area', 'rule'])
        marks[kind] = f.querySelectorAll(`svg g.mark-${kind} path, svg g.mark-${kind} line`).length;
      const bb = svg ? svg.getBoundingClientRect() : { width: 0, height: 0 };
      figs[f.dataset.figure] = { svg: !!svg, width: bb.width, height: bb.height, marks,
        texts: svg ? [...svg.querySelectorAll('text')].map((t) => t.textContent) : [] };
    }
    const cert = {};
    for (const s of document.querySelectorAll('[data-cert]')) cert[s.dataset.cert] = { value: JSON.parse(s.dataset.value), text: s.textContent };
    const omitted = {};
    for (const p of document.querySelectorAll('[data-omitted]')) omitted[p.dataset.omitted] = p.textContent;
    return {
      title: document.title,
      figures: figs,
      certificate: cert,
      certificate_text: document.querySelector('#certificate')?.textContent ?? null,
      verdict: document.querySelector('#verdict')?.textContent ?? null,
      verify: document.querySelector('[data-verify]')?.dataset.verify ?? null,
      caution: document.querySelector('#caution')?.textContent ?? null,
      fingerprint: document.querySelector('#fingerprint')?.textContent ?? null,
      omitted,
      scripts_with_src: [...document.querySelectorAll('script[src]')].map((s) => s.src),
      links: [...document.querySelectorAll('link[href]')].map((l) => l.href),
      images_external: [...document.querySelectorAll('img')].filter((i) => !i.src.startsWith('data:')).map((i) => i.src),
    };
  }));
  // Hover the middle cell of the rule map: a tooltip with the labels must appear.
  const cell = await page.$('#fig-rule_map svg g.mark-rect path');
  if (cell) {
    await cell.scrollIntoViewIfNeeded();
    const box = await cell.boundingBox();
    await page.mouse.move(box.x + box.width / 2, box.y + box.height / 2);
    await page.waitForTimeout(300);
    out.tooltip = await page.evaluate(() => {
      const t = document.querySelector('#vg-tooltip-element');
      return t && t.classList.contains('visible') ? t.textContent : null;
    });
    await page.mouse.move(0, 0);
    await page.evaluate(() => window.scrollTo(0, 0));
  }
  if (shot) await page.screenshot({ path: shot, fullPage: false });
  await ctx.close();
} finally {
  await browser.close();
}
process.stdout.write(JSON.stringify(out) + '\n');
