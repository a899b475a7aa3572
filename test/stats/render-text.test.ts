import { describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { buildReport } from '../../src/stats/report.ts';
import { formatCount, formatDecimal, formatShare, renderTable, renderText, wrap } from '../../src/stats/render-text.ts';
import { statsInputOf, syntheticSentences } from './fixtures.ts';

const report7 = buildReport(statsInputOf(syntheticSentences(4, 800), 7));

/** The lines of the section titled `title` (up to the next section heading). */
function section(text: string, title: string): string[] {
  const lines = text.split('\n');
  const start = lines.findIndex((line) => line.startsWith(title));
  expect(start).toBeGreaterThanOrEqual(0);
  let end = start + 2;
  while (end < lines.length && !/^═+$/.test(lines[end + 1] ?? '')) end++;
  return lines.slice(start, end);
}

describe('renderText', () => {
  test('every line fits the width, for narrow and wide pages', () => {
    for (const width of [40, 60, 80, 100, 160]) {
      const text = renderText(report7, width);
      for (const line of text.split('\n')) expect(line.length, `width ${width}: "${line}"`).toBeLessThanOrEqual(width);
    }
  });

  test('findings come first, most severe first', () => {
    const text = renderText(report7);
    const lines = text.split('\n');
    const findings = lines.findIndex((line) => line.startsWith('Findings:'));
    const orders = lines.findIndex((line) => line === 'Orders');
    expect(findings).toBeGreaterThan(0);
    expect(findings).toBeLessThan(orders);
    const tags = lines.slice(findings, orders).map((line) => line.match(/^ {2}(PROBLEM|WARNING|NOTE) /)?.[1]).filter(Boolean);
    expect(tags.length).toBe(report7.diagnostics.length);
    const rank = { PROBLEM: 0, WARNING: 1, NOTE: 2 } as Record<string, number>;
    expect(tags.map((t) => rank[t as string])).toEqual(tags.map((t) => rank[t as string]).sort());
    for (const d of report7.diagnostics) expect(text).toContain(d.title);
  });

  test('tables split into column groups keep every value on its row, in order', () => {
    for (const width of [50, 100]) {
      const lines = section(renderText(report7, width), 'Count-of-counts');
      const cells = lines.filter((line) => /^ {2}1 /.test(line)).flatMap((line) => line.trim().split(/\s+/).slice(1));
      const expected = report7.orders.flatMap((o) => [o.raw, ...(o.continuation ? [o.continuation] : [])]).map((s) => formatCount(s.listed[0]));
      expect(cells).toEqual(expected);
    }
    // At 50 columns the 13 columns do not fit on one line: several groups, each with its header row.
    const narrow = section(renderText(report7, 50), 'Count-of-counts');
    expect(narrow.filter((line) => /^ {2}r /.test(line)).length).toBeGreaterThan(1);
  });

  test('states the numbers of every order', () => {
    const text = renderText(report7);
    for (const o of report7.orders) {
      expect(text).toMatch(new RegExp(`\\n {2}${o.order} +${formatCount(o.distinct)} +${formatCount(o.total)} `));
      const kn = o.discounts.modifiedKneserNey;
      if (kn.d1 !== null) expect(text).toContain(formatDecimal(kn.d1));
    }
  });

  test('rejects a width outside its range with a config error naming it', () => {
    expect(() => renderText(report7, 10)).toThrow(QuernError);
    expect(() => renderText(report7, 10)).toThrow(/width must be an integer in 40\.\.400/);
    expect(() => renderText(report7, 100.5)).toThrow(/width/);
  });
});

describe('text helpers', () => {
  test('wrap, formats, and a small table', () => {
    expect(wrap('aa bb cc dd', 5)).toEqual(['aa bb', 'cc dd']);
    expect(wrap('averyveryverylongword x', 5)).toEqual(['averyveryverylongword', 'x']);
    expect(formatCount(1161192)).toBe('1,161,192');
    expect(formatDecimal(0.76346099)).toBe('0.7635');
    expect(formatDecimal(2.4685e-5)).toBe('2.469e-5');
    expect(formatShare(0.441835)).toBe('44.2%');
    expect(formatShare(0.0388)).toBe('3.88%');
    expect(renderTable({ headers: ['r', 'n'], rows: [['1', '120'], ['10', '1']] }, 40)).toEqual([
      '  r     n',
      '  ───────',
      '  1   120',
      '  10    1',
    ]);
  });
});
