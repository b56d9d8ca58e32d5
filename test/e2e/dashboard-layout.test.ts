// The dashboard's layout in a real browser (Debian's Chromium through playwright-core) at a
// phone's, a tablet's and two desktops' widths, against a simulated run of the demo's edge filter:
// no horizontal scroll and no text cut short, in the normal and the large-type view; the words
// of the status line; warnings styled apart from normal and critical; cuts marked; downloads.
// Screenshots are kept in test/artifacts/layout-<width>[-large].png. Without /usr/bin/chromium
// the test is skipped, except in CI (CI=true), where a missing browser is a failure.
import { existsSync, mkdirSync, readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { chromium, type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { FastifyInstance } from 'fastify';
import { buildServer } from '../../src/server/build-server.ts';
import { startSimulatedRun, type SimulatedRun } from '../../src/server/simulated-run.ts';
import { edge, tempDir, TOKEN, typical } from '../server/support.ts';

const CHROMIUM = '/usr/bin/chromium';
const haveChromium = existsSync(CHROMIUM);
const inCi = process.env.CI === 'true';
const ARTIFACTS = fileURLToPath(new URL('../artifacts/', import.meta.url));
const VIEWPORTS = [
  { width: 390, height: 844 },
  { width: 768, height: 1024 },
  { width: 1024, height: 768 },
  { width: 1440, height: 900 },
];

/**
 * Elements whose text must not be cut short: each one's scrollWidth within its clientWidth
 * (a box that clips or ellipsises its text has more to scroll than it shows). Page script as
 * text: these tests are compiled without the DOM's types.
 */
const CLIPPED = `(() => {
  const selectors = ['.status-state', '.status-item dd', '.status-item dt', '#st-alert-text', '.bar > *', '.panel', '.panel-head', '.panel-head .sub',
    '.seg', '.downloads', '.readout', '.ro-big', '.ro-list div', '.legend li', '.table-wrap', '#stack-body td', '.stack-table th', '#log-list li', '.buttons .cmd', '.figures div', '.note'];
  const out = [];
  for (const selector of selectors) {
    for (const el of document.querySelectorAll(selector)) {
      if (el.getClientRects().length === 0) continue;
      if (el.scrollWidth > el.clientWidth) out.push(selector + ' "' + el.textContent.trim().slice(0, 40) + '" ' + el.scrollWidth + ' > ' + el.clientWidth);
      const box = el.getBoundingClientRect();
      if (box.right > window.innerWidth + 0.5 || box.left < -0.5) out.push(selector + ' "' + el.textContent.trim().slice(0, 40) + '" outside the window: ' + Math.round(box.left) + '..' + Math.round(box.right));
    }
  }
  return out;
})()`;

if (!haveChromium && inCi) {
  describe('dashboard layout in Chromium', () => {
    it('needs Chromium at /usr/bin/chromium in CI', () => {
      throw new Error(`${CHROMIUM} is missing: install it (apt-get install -y chromium); in CI this test must run, not skip`);
    });
  });
} else if (!haveChromium) {
  describe.skip(`dashboard layout in Chromium — skipped: ${CHROMIUM} is missing (apt-get install -y chromium to run it)`, () => {
    it('fits every width', () => undefined);
  });
} else {
  describe('dashboard layout in Chromium', () => {
    let browser: Browser;
    let app: FastifyInstance;
    let sim: SimulatedRun;
    let url: string;
    const stop = new AbortController();

    beforeAll(async () => {
      const runsDir = tempDir('e2e-layout');
      // The demo's 27-layer edge filter, cut by the model fit, at 40× real time: a cut every few seconds.
      sim = startSimulatedRun({ recipe: edge, profile: typical, seed: 1, speed: 40, journalDir: runsDir, signal: stop.signal, controller: { estimator: 'fit' } });
      app = buildServer({ hub: sim.hub, runsDir }, { token: TOKEN, host: '127.0.0.1' });
      url = await app.listen({ port: 0, host: '127.0.0.1' });
      browser = await chromium.launch({ executablePath: CHROMIUM, args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking'] });
      mkdirSync(ARTIFACTS, { recursive: true });
    });

    afterAll(async () => {
      await browser?.close();
      stop.abort();
      await sim?.done.catch(() => undefined);
      await app?.close();
    });

    /** A page at the viewport once the run shows a finished layer (so every column has figures). */
    async function open(viewport: { width: number; height: number }): Promise<Page> {
      const page = await browser.newPage({ viewport, acceptDownloads: true });
      await page.goto(`${url}/`);
      await expect.poll(() => page.textContent('#st-word'), { timeout: 10000 }).toBe('Depositing');
      await expect.poll(() => page.locator('#stack-body tr[data-status="past"]').count(), { timeout: 20000 }).toBeGreaterThan(0);
      await expect.poll(async () => Number(await page.getAttribute('#trace-chart', 'data-points')), { timeout: 10000 }).toBeGreaterThan(3);
      return page;
    }

    const fits = async (page: Page): Promise<{ scrollWidth: number; innerWidth: number; clipped: string[] }> => ({
      ...(await page.evaluate<{ scrollWidth: number; innerWidth: number }>('({ scrollWidth: document.documentElement.scrollWidth, innerWidth: window.innerWidth })')),
      clipped: await page.evaluate<string[]>(CLIPPED),
    });

    it('fits 390, 768, 1024 and 1440 px with nothing cut short, in normal and in large type', async () => {
      for (const viewport of VIEWPORTS) {
        const page = await open(viewport);
        try {
          // A finished row's detail open too: it must wrap, not widen the table.
          await page.locator('#stack-body tr[data-status="past"]').first().click();
          await expect.poll(() => page.locator('#stack-body tr.detail').count()).toBe(1);
          const normal = await fits(page);
          expect(normal.scrollWidth, `${viewport.width} px`).toBeLessThanOrEqual(normal.innerWidth);
          expect(normal.clipped, `${viewport.width} px`).toEqual([]);
          await page.screenshot({ path: `${ARTIFACTS}layout-${viewport.width}.png`, fullPage: true });

          // History, with a run's summary open, fits too.
          await page.click('#nav-history');
          await expect.poll(() => page.locator('#runs-body tr').count()).toBeGreaterThan(0);
          await page.locator('#runs-body button[data-summary]').first().click();
          await expect.poll(() => page.isVisible('#summary-panel')).toBe(true);
          const history = await fits(page);
          expect(history.scrollWidth, `${viewport.width} px history`).toBeLessThanOrEqual(history.innerWidth);
          expect(history.clipped, `${viewport.width} px history`).toEqual([]);
          await page.click('#nav-live');

          // One key turns on large type: the status, the readout and the trace alone, in ≥ 14 px.
          await page.keyboard.press('l');
          await expect.poll(() => page.getAttribute('body', 'data-large')).toBe('true');
          expect(await page.isVisible('#stack-wrap')).toBe(false);
          expect(await page.isVisible('#log-list')).toBe(false);
          for (const id of ['#status', '#readout', '#trace-chart']) expect(await page.isVisible(id), id).toBe(true);
          expect(Number(await page.getAttribute('#trace-chart', 'data-font-px'))).toBeGreaterThanOrEqual(14);
          const smallest = await page.evaluate<number>(
            "Math.min(...[...document.querySelectorAll('.trace .legend li, .ro-list div, .status-item dt, .panel-head .sub')].map((e) => parseFloat(getComputedStyle(e).fontSize)))",
          );
          expect(smallest, `${viewport.width} px`).toBeGreaterThanOrEqual(14);
          const large = await fits(page);
          expect(large.scrollWidth, `${viewport.width} px large`).toBeLessThanOrEqual(large.innerWidth);
          expect(large.clipped, `${viewport.width} px large`).toEqual([]);
          await page.screenshot({ path: `${ARTIFACTS}layout-${viewport.width}-large.png` });
          // And the button turns it off again.
          await page.click('#large-toggle');
          await expect.poll(() => page.getAttribute('body', 'data-large')).toBe('false');
          expect(Number(await page.getAttribute('#trace-chart', 'data-font-px'))).toBe(12);
          expect(await page.isVisible('#stack-wrap')).toBe(true);
        } finally {
          await page.close();
        }
      }
    }, 180000);

    it('names the rule that cuts, marks cuts, styles warnings apart, and downloads readings and charts', async () => {
      const page = await open({ width: 1280, height: 800 });
      try {
        // The model fit cuts this run's optical layers: the status line says so, not the planned mode.
        await expect.poll(() => page.textContent('#st-cut'), { timeout: 10000 }).toBe('model fit');
        expect(await page.getAttribute('#st-cut', 'title')).toMatch(/^planned: (trigger level|turning point); optical layers decided by the model fit$/);
        expect(await page.textContent('#trace-sub')).toMatch(/cut on model fit$/);
        // The log and the table use the same words; no journal code shows.
        const words = `${await page.textContent('#log-list')} ${await page.textContent('#stack-body')}`;
        expect(words).toMatch(/cut on model fit \(plan: trigger level\)/);
        expect(words).not.toMatch(/model-fit|crystal-thickness|trigger-level|turn\. pt/);
        // Past cuts on the crystal strip, one per cut in the log.
        const cutsInLog = await page.locator('#log-list li[data-kind="cut"]').count();
        expect(Number(await page.getAttribute('#crystal-chart', 'data-cuts'))).toBeGreaterThanOrEqual(cutsInLog);

        // Warnings: their own colour and shape, between none and critical.
        const look = (severity: string): Promise<string> =>
          page.evaluate<string>(
            `(() => { const box = document.getElementById('st-alert'); box.dataset.severity = '${severity}'; const shape = box.querySelector('.shape'); const s = getComputedStyle(box); return [s.color, s.backgroundColor, getComputedStyle(shape).clipPath, getComputedStyle(shape).borderRadius].join(' | '); })()`,
          );
        const [none, warning, critical] = [await look('none'), await look('warning'), await look('critical')];
        expect(new Set([none, warning, critical]).size).toBe(3);
        expect(warning).toMatch(/polygon/); // a triangle
        expect(warning.split(' | ')[0]).not.toBe(critical.split(' | ')[0]);
        expect(warning.split(' | ')[0]).not.toBe(none.split(' | ')[0]);

        // The trace's readings as CSV: a header and one row per point shown.
        const [csv] = await Promise.all([page.waitForEvent('download'), page.click('[data-download="trace"][data-as="csv"]')]);
        expect(csv.suggestedFilename()).toMatch(/^fringe-.+-trace-layer\d+\.csv$/);
        const rows = readFileSync(await csv.path(), 'utf8').trim().split('\r\n');
        expect(rows[0]).toBe('run time s,time in layer s,signal %,chip thickness nm');
        expect(rows.length).toBeGreaterThan(3);
        for (const row of rows.slice(1)) expect(row.split(',').map(Number).every(Number.isFinite), row).toBe(true);
        // The outcome as SVG: a standalone document with the two spectra.
        const [svg] = await Promise.all([page.waitForEvent('download'), page.click('[data-download="outcome"][data-as="svg"]')]);
        const drawing = readFileSync(await svg.path(), 'utf8');
        expect(drawing).toMatch(/^<svg xmlns="http:\/\/www\.w3\.org\/2000\/svg"/);
        expect(drawing.match(/<path d="M/g)?.length).toBe(2);
        expect(drawing).toContain('as deposited');
      } finally {
        await page.close();
      }
      // The crystal's rate as PNG (from a fresh page: Chromium holds back a page's third download in a row until the user allows it).
      const second = await browser.newPage({ acceptDownloads: true });
      try {
        await second.goto(`${url}/`);
        await expect.poll(async () => Number(await second.getAttribute('#crystal-chart', 'data-cuts')), { timeout: 10000 }).toBeGreaterThan(0);
        const [png] = await Promise.all([second.waitForEvent('download'), second.click('[data-download="crystal"][data-as="png"]')]);
        expect(png.suggestedFilename()).toMatch(/-crystal\.png$/);
        expect(readFileSync(await png.path()).subarray(1, 4).toString()).toBe('PNG');
      } finally {
        await second.close();
      }
    }, 90000);
  });
}
