// Opens every page of a hexvigil report folder in Debian's Chromium (never a downloaded
// browser) and prints what it saw as one JSON object on stdout. tests/browser.rs runs it and
// makes the assertions; this script only observes and acts like a reader would.
//
//   node tests/browser/check_report.mjs REPORT_DIR [--shots DIR] [--text]
//
// Per page: title, console errors, uncaught errors, every request the page made, images (alt,
// loaded), SVG and table labels, elements carrying event-handler attributes, script elements,
// horizontal overflow at a 390 px phone width. On pages with the changeset table: sorting by
// clicking headers, the filter box and the "flagged only" switch. --shots writes screenshots of
// the index and the first region page at 1280 px and 390 px; --text adds each page's text.

import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { chromium } from 'playwright-core';

const CHROMIUM = '/usr/bin/chromium';
const ARGS = [
  '--no-sandbox',
  '--disable-gpu',
  '--no-first-run',
  '--disable-background-networking',
  '--disable-component-update',
  '--disable-sync',
];
const DESKTOP = { width: 1280, height: 900 };
const PHONE = { width: 390, height: 844 };
// Screenshots show the top of the page, where a reader starts; capped so samples stay small.
const SHOT_MAX_HEIGHT = { desktop: 2600, phone: 3200 };
// Columns of the changeset table the sort check clicks, by header text.
const SORT_COLUMNS = ['Deleted', 'Score', 'Mapper'];

function parseArgs(argv) {
  const out = { dir: null, shots: null, text: false };
  for (let i = 0; i < argv.length; i += 1) {
    if (argv[i] === '--shots') out.shots = argv[++i];
    else if (argv[i] === '--text') out.text = true;
    else if (!out.dir) out.dir = argv[i];
    else throw new Error(`unexpected argument ${argv[i]}`);
  }
  if (!out.dir) throw new Error('usage: check_report.mjs REPORT_DIR [--shots DIR] [--text]');
  return out;
}

// What the page holds, read inside the page.
function pageFacts(withText) {
  const labelOf = (el) => {
    const ids = el.getAttribute('aria-labelledby');
    if (ids) {
      return ids.split(/\s+/).map((id) => document.getElementById(id)?.textContent ?? '').join(' ').trim();
    }
    return (el.getAttribute('aria-label') ?? '').trim();
  };
  const handlerElements = Array.from(document.querySelectorAll('*')).filter((el) =>
    Array.from(el.attributes).some((a) => a.name.toLowerCase().startsWith('on')));
  const body = document.body.cloneNode(true);
  body.querySelectorAll('script, style').forEach((n) => n.remove());
  return {
    title: document.title,
    lang: document.documentElement.lang,
    userAgent: navigator.userAgent,
    h1: document.querySelector('h1')?.textContent ?? null,
    pwned: typeof window.__pwned !== 'undefined',
    handlerElements: handlerElements.map((el) => el.outerHTML.slice(0, 120)),
    scriptElements: document.scripts.length,
    iframes: document.querySelectorAll('iframe, object, embed').length,
    javascriptLinks: Array.from(document.querySelectorAll('[href], [src]')).filter((el) =>
      /^\s*javascript:/i.test(el.getAttribute('href') ?? el.getAttribute('src') ?? '')).length,
    images: Array.from(document.images).map((img) => ({
      src: img.getAttribute('src'),
      alt: img.getAttribute('alt'),
      loaded: img.complete && img.naturalWidth > 0,
    })),
    svgs: Array.from(document.querySelectorAll('svg')).map((svg) => ({
      role: svg.getAttribute('role'),
      label: labelOf(svg),
    })),
    tables: Array.from(document.querySelectorAll('table')).map((t) => ({
      id: t.id,
      caption: t.caption?.textContent.trim() ?? '',
      label: labelOf(t),
      headerCells: t.querySelectorAll('th').length,
      headerCellsWithoutScope: t.querySelectorAll('th:not([scope])').length,
    })),
    text: withText ? body.textContent : null,
  };
}

async function loadImages(page) {
  // Heat images are lazy: bring each into view and wait until it has loaded or failed.
  await page.evaluate(async () => {
    for (const img of Array.from(document.images)) {
      img.scrollIntoView();
      await img.decode().catch(() => {});
    }
    window.scrollTo(0, 0);
  });
}

async function columnValues(page, col) {
  return page.evaluate((c) => {
    const rows = Array.from(document.querySelectorAll('#changesets tbody tr'));
    return rows.map((r) => {
      const cell = r.cells[c];
      return (cell.getAttribute('data-v') ?? cell.textContent).trim();
    });
  }, col);
}

async function visibleRows(page) {
  return page.evaluate(() => {
    const rows = Array.from(document.querySelectorAll('#changesets tbody tr'));
    const shown = rows.filter((r) => !r.hidden && r.getClientRects().length > 0);
    return {
      visible: shown.length,
      visibleFlagged: shown.filter((r) => r.classList.contains('flagged')).length,
      texts: shown.map((r) => r.textContent.toLowerCase()),
    };
  });
}

async function tableChecks(page) {
  const present = await page.$('#changesets');
  if (!present) return null;
  const header = await page.evaluate(() => ({
    names: Array.from(document.querySelectorAll('#changesets thead th')).map((th) => th.textContent.trim()),
    toolsShown: !document.getElementById('changeset-tools').hidden,
    total: document.querySelectorAll('#changesets tbody tr').length,
    flagged: document.querySelectorAll('#changesets tbody tr.flagged').length,
    firstMapper: document.querySelector('#changesets tbody tr td[data-label="Mapper"]')?.textContent.trim() ?? '',
  }));
  const result = { ...header, sorts: [], filter: null, flaggedOnly: null };
  for (const name of SORT_COLUMNS) {
    const col = header.names.findIndex((n) => n.replace(/[↕↑↓]/g, '').trim() === name);
    if (col < 0) continue;
    const before = await columnValues(page, col);
    const clicks = [];
    for (let i = 0; i < 2; i += 1) {
      await page.locator('#changesets thead th').nth(col).locator('button').click();
      clicks.push({
        ariaSort: await page.locator('#changesets thead th').nth(col).getAttribute('aria-sort'),
        values: await columnValues(page, col),
      });
    }
    result.sorts.push({ column: name, before, clicks });
  }
  if (header.total > 0) {
    const query = header.firstMapper;
    const expected = await page.evaluate((q) => Array.from(document.querySelectorAll('#changesets tbody tr'))
      .filter((r) => r.textContent.toLowerCase().includes(q.toLowerCase())).length, query);
    await page.fill('#cs-filter', query);
    const filtered = await visibleRows(page);
    const status = await page.textContent('#cs-status');
    await page.fill('#cs-filter', '');
    const cleared = (await visibleRows(page)).visible;
    result.filter = {
      query,
      expected,
      visible: filtered.visible,
      allMatch: filtered.texts.every((t) => t.includes(query.toLowerCase())),
      status,
      visibleAfterClearing: cleared,
    };
    await page.check('#cs-flagged');
    const only = await visibleRows(page);
    await page.uncheck('#cs-flagged');
    result.flaggedOnly = {
      visible: only.visible,
      visibleFlagged: only.visibleFlagged,
      visibleAfterUnchecking: (await visibleRows(page)).visible,
    };
  }
  return result;
}

async function checkPage(context, file, opts, shotName) {
  const page = await context.newPage();
  const requests = [];
  const consoleErrors = [];
  const pageErrors = [];
  page.on('request', (r) => requests.push(r.url()));
  page.on('console', (m) => { if (m.type() === 'error') consoleErrors.push(m.text()); });
  page.on('pageerror', (e) => pageErrors.push(String(e)));
  await page.setViewportSize(DESKTOP);
  const url = pathToFileURL(file).href;
  const response = await page.goto(url, { waitUntil: 'load' });
  await loadImages(page);
  const facts = await page.evaluate(pageFacts, opts.text);
  const shots = [];
  if (opts.shots && shotName) {
    const height = await page.evaluate(() => document.documentElement.scrollHeight);
    const path = join(opts.shots, `${shotName}-desktop.png`);
    await page.screenshot({
      path, fullPage: true, clip: { x: 0, y: 0, width: DESKTOP.width, height: Math.min(height, SHOT_MAX_HEIGHT.desktop) },
    });
    shots.push({ path, width: DESKTOP.width });
  }
  const table = await tableChecks(page);
  await page.setViewportSize(PHONE);
  const phone = await page.evaluate(() => ({
    scrollWidth: document.documentElement.scrollWidth,
    clientWidth: document.documentElement.clientWidth,
    // For the failure message: elements reaching past the screen's right edge, or whose text
    // spills out of them (visually hidden table headers and captions, and closed details,
    // excepted).
    wide: Array.from(document.querySelectorAll('body *'))
      .filter((el) => !el.closest('thead, caption, .sr-only, script, style, details:not([open]) > :not(summary)'))
      .filter((el) => el.getBoundingClientRect().right > document.documentElement.clientWidth + 1
        || (getComputedStyle(el).overflowX === 'visible' && el.scrollWidth > el.clientWidth + 1
          && el.clientWidth > 0))
      .slice(0, 5)
      .map((el) => el.outerHTML.slice(0, 100)),
  }));
  if (opts.shots && shotName) {
    await page.evaluate(() => window.scrollTo(0, 0));
    const height = await page.evaluate(() => document.documentElement.scrollHeight);
    const path = join(opts.shots, `${shotName}-phone.png`);
    await page.screenshot({
      path, fullPage: true, clip: { x: 0, y: 0, width: PHONE.width, height: Math.min(height, SHOT_MAX_HEIGHT.phone) },
    });
    shots.push({ path, width: PHONE.width });
  }
  await page.close();
  return {
    file,
    url,
    status: response ? response.status() : null,
    requests,
    consoleErrors,
    pageErrors,
    ...facts,
    table,
    phone,
    shots,
  };
}

async function main() {
  const opts = parseArgs(process.argv.slice(2));
  const dir = resolve(opts.dir);
  const summary = JSON.parse(readFileSync(join(dir, 'summary.json'), 'utf8'));
  const pages = [{ file: join(dir, 'index.html'), shot: 'index' }];
  summary.regions.forEach((r, i) => {
    pages.push({ file: join(dir, r.slug, 'index.html'), shot: i === 0 ? 'region' : null });
  });
  const profile = mkdtempSync(join(tmpdir(), 'hexvigil-chromium-'));
  let context;
  try {
    context = await chromium.launchPersistentContext(profile, {
      executablePath: CHROMIUM,
      headless: true,
      args: ARGS,
      viewport: DESKTOP,
      deviceScaleFactor: 1,
      acceptDownloads: false,
    });
    const results = [];
    for (const p of pages) {
      results.push(await checkPage(context, p.file, opts, p.shot));
    }
    process.stdout.write(`${JSON.stringify({ pages: results })}\n`);
  } finally {
    if (context) await context.close();
    rmSync(profile, { recursive: true, force: true });
  }
}

main().catch((e) => {
  process.stderr.write(`check_report.mjs: ${e && e.stack ? e.stack : e}\n`);
  process.exit(1);
});
