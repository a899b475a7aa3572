import { existsSync, mkdirSync, writeFileSync } from 'node:fs';
import { resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { chromium } from 'playwright-core';
import { describe, expect, test } from 'vitest';
import { buildReport, type Report } from '../../src/stats/report.ts';
import { escapeHtml, renderHtml } from '../../src/stats/render-html.ts';
import { statsInputOf, syntheticSentences } from './fixtures.ts';

const CHROMIUM_PATH = '/usr/bin/chromium';
const OUTPUT_DIR = resolve(import.meta.dirname, '../../test-output/report');

/** A small synthetic job of 3 orders. */
const report = buildReport(statsInputOf(syntheticSentences(9, 600), 3));

/** What each chart must hold: series id → number of data points (fit lines have none). */
function expectedCharts(r: Report): Record<string, Record<string, number>> {
  const countOfCounts: Record<string, number> = {};
  for (const o of r.orders) {
    countOfCounts[`order-${o.order}`] = o.raw.pairs.length;
    if (o.simpleGoodTuring.status === 'fitted') countOfCounts[`order-${o.order}-fit`] = 0;
  }
  const defined = (values: Array<number | null>): number => values.filter((v) => v !== null).length;
  return {
    'count-of-counts': countOfCounts,
    discounts: {
      absolute: defined(r.orders.map((o) => o.discounts.absolute.discount)),
      d1: defined(r.orders.map((o) => o.discounts.modifiedKneserNey.d1)),
      d2: defined(r.orders.map((o) => o.discounts.modifiedKneserNey.d2)),
      d3plus: defined(r.orders.map((o) => o.discounts.modifiedKneserNey.d3Plus)),
    },
    'singleton-share': {
      raw: defined(r.orders.map((o) => o.raw.singletonShare)),
      continuation: defined(r.orders.map((o) => o.continuation?.singletonShare ?? null)),
    },
    zipf: { unigrams: r.zipf!.curve.length, 'unigrams-fit': 0 },
  };
}

describe('renderHtml', () => {
  const html = renderHtml(report);

  test('is one self-contained page: no scripts, no external resources', () => {
    expect(html.startsWith('<!DOCTYPE html>')).toBe(true);
    expect(html).not.toMatch(/<script/i);
    expect(html).not.toMatch(/<link|<img|<iframe|@import|src=|href=/i);
    // The only URL is the SVG namespace name, which is never fetched.
    const urls = html.match(/https?:\/\/[^"'\s)]+/g) ?? [];
    expect(new Set(urls)).toEqual(new Set(['http://www.w3.org/2000/svg']));
    for (const reference of html.match(/url\([^)]*\)/g) ?? []) expect(reference).toMatch(/^url\(#clip-[a-z-]+\)$/);
  });

  test('each chart has the expected series, legend entries and points', () => {
    const expected = expectedCharts(report);
    // The synthetic data give every kind of series something to draw.
    expect(Object.values(expected['count-of-counts']).some((n) => n > 20)).toBe(true);
    for (const [chart, series] of Object.entries(expected)) {
      const svg = html.match(new RegExp(`<svg[^>]*data-chart="${chart}"[\\s\\S]*?</svg>`))?.[0];
      expect(svg, chart).toBeDefined();
      const ids = [...svg!.matchAll(/data-series="([^"]+)"/g)].map((m) => m[1]);
      expect(ids).toEqual(Object.keys(series));
      expect([...svg!.matchAll(/data-legend="([^"]+)"/g)].map((m) => m[1])).toEqual(Object.keys(series));
      for (const [id, points] of Object.entries(series)) {
        const group = svg!.match(new RegExp(`<g data-series="${id}"[^>]*>([\\s\\S]*?)</g>`))![1];
        expect((group.match(/data-point=/g) ?? []).length, `${chart}/${id}`).toBe(points);
      }
      expect(svg).toMatch(/class="axis-title"[^>]*>[^<]+</); // axis titles
      expect((svg!.match(/<g class="axis" data-axis="[xy]"/g) ?? []).length).toBe(2);
    }
    expect(html).toContain('<section id="findings">');
    for (const d of report.diagnostics) expect(html).toContain(`data-diagnostic="${d.code}"`);
  });

  test('escapes text from the report', () => {
    const tampered = structuredClone(report);
    tampered.diagnostics[0].message = '<b>"bold" & \'quoted\'</b>';
    const page = renderHtml(tampered);
    expect(page).toContain(escapeHtml('<b>"bold" & \'quoted\'</b>'));
    expect(page).toContain('&lt;b&gt;&quot;bold&quot; &amp; &#39;quoted&#39;&lt;/b&gt;');
    expect(page).not.toContain('<b>"bold"');
  });

  const hasChromium = existsSync(CHROMIUM_PATH);
  const browserTest = hasChromium ? test : test.skip;
  browserTest(
    hasChromium
      ? 'renders every chart in headless Chromium, without scripts or network requests'
      : `renders in headless Chromium — SKIPPED: ${CHROMIUM_PATH} does not exist (CI installs it)`,
    async () => {
      mkdirSync(OUTPUT_DIR, { recursive: true });
      const htmlPath = resolve(OUTPUT_DIR, 'report.html');
      writeFileSync(htmlPath, html);
      const browser = await chromium.launch({
        executablePath: CHROMIUM_PATH,
        args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
      });
      try {
        // Scripts off: the page must render without them.
        const context = await browser.newContext({ javaScriptEnabled: false, viewport: { width: 1000, height: 800 } });
        const page = await context.newPage();
        const requests: string[] = [];
        page.on('request', (request) => requests.push(request.url()));
        const pageUrl = pathToFileURL(htmlPath).href;
        await page.goto(pageUrl, { waitUntil: 'load' });

        const expected = expectedCharts(report);
        const charts = page.locator('svg[data-chart]');
        expect(await charts.count()).toBe(Object.keys(expected).length);
        for (const [chart, series] of Object.entries(expected)) {
          const svg = page.locator(`svg[data-chart="${chart}"]`);
          const box = await svg.boundingBox();
          expect(box, chart).not.toBeNull();
          expect(box!.width).toBeGreaterThan(100);
          expect(box!.height).toBeGreaterThan(100);
          expect(await svg.locator('[data-series]').count()).toBe(Object.keys(series).length);
          for (const [id, points] of Object.entries(series)) {
            const group = svg.locator(`[data-series="${id}"]`);
            expect(await group.locator('[data-point]').count(), `${chart}/${id}`).toBe(points);
            // Something of the series was painted: its group has a nonzero box.
            const groupBox = await group.boundingBox();
            expect(groupBox, `${chart}/${id}`).not.toBeNull();
            expect(groupBox!.width + groupBox!.height).toBeGreaterThan(0);
          }
          expect(await svg.locator('[data-axis] text').count()).toBeGreaterThan(4);
        }
        // Only the page itself was loaded: no request went to the network.
        expect(requests).toEqual([pageUrl]);
        await page.screenshot({ path: resolve(OUTPUT_DIR, 'report.png'), fullPage: true });
        expect(existsSync(resolve(OUTPUT_DIR, 'report.png'))).toBe(true);
      } finally {
        await browser.close();
      }
    },
    30_000,
  );
});
