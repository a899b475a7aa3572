/**
 * Plain-text rendering of a statistics report for a terminal: findings first, then aligned tables.
 * Tables wider than the page are cut into column groups, each repeating the row labels, so every
 * line fits `width` columns. Number formats are fixed (en-US grouping) so the output is the same
 * on every machine.
 */
import { QuernError } from '../errors.ts';
import { COUNT_OF_COUNTS_LISTED_R_MAX, binBounds } from './count-of-counts.ts';
import type { Diagnostic } from './diagnostics.ts';
import type { OrderReport, Report } from './report.ts';

/** Narrowest page accepted: the widest fixed part of the layout (a row label, one number column
 *  and the findings' severity tag) still fits. */
export const TEXT_WIDTH_MIN = 40;

/** Widest page accepted: wider lines are no longer read as one line. */
export const TEXT_WIDTH_MAX = 400;

const groupedInteger = new Intl.NumberFormat('en-US', { maximumFractionDigits: 0 });

/** An integer with thousands separators: 1,161,192. */
export function formatCount(value: number): string {
  return groupedInteger.format(value);
}

/** A real number to `digits` significant digits; very small magnitudes in exponent form. */
export function formatDecimal(value: number, digits = 4): string {
  if (value === 0) return '0';
  if (!Number.isFinite(value)) return String(value);
  if (Math.abs(value) < 1e-3) return value.toExponential(digits - 1);
  return new Intl.NumberFormat('en-US', { maximumSignificantDigits: digits }).format(value);
}

/** A share as a percentage: 44.2%, 4.42%, 0.388%. */
export function formatShare(value: number): string {
  const percent = value * 100;
  if (percent === 0) return '0%';
  if (Math.abs(percent) >= 10) return `${percent.toFixed(1)}%`;
  if (Math.abs(percent) < 1e-3) return `${percent.toExponential(2)}%`;
  return `${Number(percent.toPrecision(3))}%`;
}

/** Share of the possible n-grams an order has seen: a percentage down to 10^−6, below that
 *  as a power of ten (it can underflow a float at high orders); '—' when undefined. */
export function formatObservedShare(report: OrderReport): string {
  const log10 = report.observedShareLog10;
  if (log10 === null) return '—';
  return log10 >= -6 ? formatShare(10 ** log10) : `10^${log10.toFixed(2)}`;
}

/** A nullable number, '—' when null. */
function orDash(value: number | null, format: (value: number) => string = formatDecimal): string {
  return value === null ? '—' : format(value);
}

/** Cuts `text` into lines of at most `width` characters at spaces (a longer word stays whole). */
export function wrap(text: string, width: number): string[] {
  const lines: string[] = [];
  let line = '';
  for (const word of text.split(/\s+/).filter((w) => w.length > 0)) {
    if (line.length > 0 && line.length + 1 + word.length > width) {
      lines.push(line);
      line = word;
    } else {
      line = line.length === 0 ? word : `${line} ${word}`;
    }
  }
  if (line.length > 0) lines.push(line);
  return lines;
}

/** A table: headers may hold '\n' for two-line headers; column 0 holds the row labels. */
interface Table {
  headers: string[];
  rows: string[][];
}

const COLUMN_GAP = 2;
const INDENT = '  ';

/**
 * Lays out a table: row labels left-aligned, other columns right-aligned. When the columns do not
 * fit in `width`, they are split into groups printed one below the other, each with the labels.
 */
export function renderTable(table: Table, width: number): string[] {
  const headerLines = table.headers.map((header) => header.split('\n'));
  const headerDepth = Math.max(...headerLines.map((lines) => lines.length));
  const columnWidths = table.headers.map((_, column) =>
    Math.max(...headerLines[column].map((line) => line.length), ...table.rows.map((row) => row[column].length)));
  const available = width - INDENT.length;
  const groups: number[][] = [];
  let group: number[] = [];
  let used = columnWidths[0];
  for (let column = 1; column < table.headers.length; column++) {
    const needed = COLUMN_GAP + columnWidths[column];
    if (group.length > 0 && used + needed > available) {
      groups.push(group);
      group = [];
      used = columnWidths[0];
    }
    group.push(column);
    used += needed;
  }
  if (group.length > 0 || groups.length === 0) groups.push(group);

  const out: string[] = [];
  groups.forEach((columns, groupIndex) => {
    if (groupIndex > 0) out.push('');
    const cell = (text: string, column: number): string =>
      column === 0 ? text.padEnd(columnWidths[0]) : ' '.repeat(COLUMN_GAP) + text.padStart(columnWidths[column]);
    for (let depth = 0; depth < headerDepth; depth++) {
      const lineOf = (column: number): string => {
        const lines = headerLines[column];
        return lines[depth - (headerDepth - lines.length)] ?? '';
      };
      out.push((INDENT + [0, ...columns].map((column) => cell(lineOf(column), column)).join('')).trimEnd());
    }
    const ruleWidth = columnWidths[0] + columns.reduce((sum, column) => sum + COLUMN_GAP + columnWidths[column], 0);
    out.push(INDENT + '─'.repeat(ruleWidth));
    for (const row of table.rows) out.push((INDENT + [0, ...columns].map((column) => cell(row[column], column)).join('')).trimEnd());
  });
  return out;
}

/** Explanatory text, indented and wrapped to the page. */
function paragraph(text: string, width: number): string[] {
  return wrap(text, width - INDENT.length).map((line) => INDENT + line);
}

/** A section heading, underlined (wrapped when longer than the page). */
function heading(title: string, width: number): string[] {
  const lines = wrap(title, width);
  return ['', ...lines, '═'.repeat(Math.max(...lines.map((line) => line.length)))];
}

const SEVERITY_TAG: Record<Diagnostic['severity'], string> = { problem: 'PROBLEM', warning: 'WARNING', info: 'NOTE' };

function findingsSection(diagnostics: Diagnostic[], width: number): string[] {
  const count = (severity: Diagnostic['severity']): number => diagnostics.filter((d) => d.severity === severity).length;
  const plural = (n: number, word: string): string => `${n} ${word}${n === 1 ? '' : 's'}`;
  const out = heading(`Findings: ${plural(count('problem'), 'problem')}, ${plural(count('warning'), 'warning')}, ${plural(count('info'), 'note')}`, width);
  const tagWidth = 9;
  const bodyWidth = width - INDENT.length - tagWidth;
  for (const diagnostic of diagnostics) {
    const tag = SEVERITY_TAG[diagnostic.severity].padEnd(tagWidth);
    const pad = ' '.repeat(tagWidth);
    for (const [index, line] of wrap(diagnostic.title, bodyWidth).entries()) out.push(INDENT + (index === 0 ? tag : pad) + line);
    for (const line of wrap(diagnostic.message, bodyWidth)) out.push(INDENT + pad + line);
    if (diagnostic.action !== null) {
      for (const [index, line] of wrap(`→ ${diagnostic.action}`, bodyWidth - 2).entries()) out.push(INDENT + pad + (index === 0 ? line : `  ${line}`));
    }
  }
  return out;
}

function ordersSection(orders: OrderReport[], width: number): string[] {
  const table: Table = {
    headers: ['order', 'distinct', 'occurrences', 'possible\nlog10 V^n', 'observed\nshare', 'seen once\n(raw)', 'seen once\n(cont.)', 'unseen mass\nn1/N'],
    rows: orders.map((o) => [
      String(o.order),
      formatCount(o.distinct),
      formatCount(o.total),
      orDash(o.possibleLog10, (v) => v.toFixed(2)),
      formatObservedShare(o),
      orDash(o.raw.singletonShare, formatShare),
      orDash(o.continuation?.singletonShare ?? null, formatShare),
      orDash(o.unseenMass, formatShare),
    ]),
  };
  return [...heading('Orders', width), ...renderTable(table, width)];
}

function countOfCountsSection(orders: OrderReport[], width: number): string[] {
  const rMax = Math.max(0, ...orders.flatMap((o) => [o.raw.rMax, o.continuation?.rMax ?? 0]));
  const labels: string[] = [];
  for (let r = 1; r <= COUNT_OF_COUNTS_LISTED_R_MAX; r++) labels.push(String(r));
  const bounds = binBounds(rMax);
  for (const [rMin, rEnd] of bounds) labels.push(`${rMin}–${rEnd - 1}`);
  const headers = ['r'];
  const columns: string[][] = [];
  for (const o of orders) {
    for (const [summary, kind] of [[o.raw, 'raw'], [o.continuation, 'cont.']] as const) {
      if (summary === null) continue;
      headers.push(`order ${o.order}\n${kind}`);
      const cells = summary.listed.map(formatCount);
      for (let index = 0; index < bounds.length; index++) cells.push(formatCount(summary.bins[index]?.types ?? 0));
      columns.push(cells);
    }
  }
  const rows = labels.map((label, index) => [label, ...columns.map((cells) => cells[index])]);
  return [
    ...heading('Count-of-counts', width),
    ...paragraph('n_r: distinct n-grams seen exactly r times; from r = 11 on, n_r summed over bins. "cont." = the continuation counts Kneser-Ney uses at lower orders.', width),
    '',
    ...renderTable({ headers, rows }, width),
  ];
}

function goodTuringSection(orders: OrderReport[], width: number): string[] {
  const rCount = Math.max(0, ...orders.map((o) => o.goodTuring.length));
  const rows: string[][] = [];
  for (let index = 0; index < rCount; index++) {
    rows.push([String(index + 1), ...orders.map((o) => orDash(o.goodTuring[index]?.rStar ?? null))]);
  }
  const notes = orders.flatMap((o) => o.goodTuring.filter((e) => e.note !== null).map((e) => `order ${o.order}, r = ${e.r}: ${e.note}`));
  const out = [
    ...heading('Good-Turing estimates', width),
    ...paragraph('r* = (r+1)·n(r+1)/n(r) of the raw counts.', width),
    '',
    ...renderTable({ headers: ['r', ...orders.map((o) => `order ${o.order}`)], rows }, width),
  ];
  if (notes.length > 0) out.push('', ...notes.flatMap((note) => wrap(`— ${note}`, width - 4).map((line, i) => INDENT + (i === 0 ? line : `  ${line}`))));
  return out;
}

function simpleGoodTuringSection(orders: OrderReport[], width: number): string[] {
  const rows = orders.map((o) => {
    const sgt = o.simpleGoodTuring;
    if (sgt.status === 'unavailable') return [String(o.order), '—', '—', '—', '—', '—', '—', '—'];
    const rStarOf = (r: number): string => orDash(sgt.rows.find((row) => row.r === r)?.rStar ?? null);
    return [
      String(o.order),
      formatCount(sgt.total),
      formatShare(sgt.unseenMass),
      formatDecimal(sgt.slope) + (sgt.slopeWarning ? ' (!)' : ''),
      formatDecimal(sgt.intercept),
      orDash(sgt.switchR, formatCount),
      rStarOf(1),
      rStarOf(2),
    ];
  });
  const unavailable = orders.flatMap((o) => (o.simpleGoodTuring.status === 'unavailable' ? [`order ${o.order}: ${o.simpleGoodTuring.reason}`] : []));
  const out = [
    ...heading('Simple Good-Turing (Gale & Sampson 1995)', width),
    ...paragraph('Fit ln Z_r = a + b·ln r on the raw counts; Turing estimates up to the switch, smoothed ones from it on. (!) marks b > −1, where the method does not hold.', width),
    '',
    ...renderTable({ headers: ['order', 'N', 'P0 = n1/N', 'slope b', 'intercept a', 'smoothed\nfrom r', 'r* at\nr = 1', 'r* at\nr = 2'], rows }, width),
  ];
  if (unavailable.length > 0) out.push('', ...unavailable.flatMap((line) => paragraph(`— ${line}`, width)));
  return out;
}

function discountsSection(orders: OrderReport[], width: number): string[] {
  const kneserNey: Table = {
    headers: ['order', 'counts', 'n1', 'n2', 'n3', 'n4', 'D1', 'D2', 'D3+', 'absolute D\n(raw)'],
    rows: orders.map((o) => {
      const kn = o.discounts.modifiedKneserNey;
      return [
        String(o.order),
        o.discounts.kneserNeySource,
        formatCount(kn.n1),
        formatCount(kn.n2),
        formatCount(kn.n3),
        formatCount(kn.n4),
        orDash(kn.d1),
        orDash(kn.d2),
        orDash(kn.d3Plus),
        orDash(o.discounts.absolute.discount),
      ];
    }),
  };
  const k = Math.max(0, ...orders.map((o) => o.discounts.katz.discounts.length));
  const katz: Table = {
    headers: ['order', '(k+1)n(k+1)\n/n1', ...Array.from({ length: k }, (_, i) => `d${i + 1}`)],
    rows: orders.map((o) => [
      String(o.order),
      orDash(o.discounts.katz.cutoffShare),
      ...Array.from({ length: k }, (_, i) => orDash(o.discounts.katz.discounts[i]?.ratio ?? null)),
    ]),
  };
  return [
    ...heading('Discounts', width),
    ...paragraph('Modified Kneser-Ney (Chen & Goodman 1998) from the counts named in "counts"; absolute discounting (Ney, Essen & Kneser 1994) and Katz (1987) from the raw counts. — = undefined.', width),
    '',
    ...renderTable(kneserNey, width),
    '',
    ...renderTable(katz, width),
  ];
}

function zipfSection(report: Report, width: number): string[] {
  const zipf = report.zipf;
  const out = heading('Word frequencies (Zipf)', width);
  if (zipf === null) return [...out, ...paragraph('No fit: fewer than two words have a count.', width)];
  const text =
    `Least-squares line of log10 count on log10 rank over ranks 1..${formatCount(zipf.rankMax)} ` +
    `(${formatCount(zipf.ranksFitted)} words with a count; </s> and <unk> included): exponent s = ${formatDecimal(zipf.exponent, 4)}, ` +
    `log10 count at rank 1 = ${formatDecimal(zipf.interceptLog10, 4)}, R² = ${formatDecimal(zipf.rSquared, 3)}.`;
  return [...out, ...paragraph(text, width)];
}

/** Renders `report` as text lines of at most `width` columns (default 100), findings first. */
export function renderText(report: Report, width = 100): string {
  if (!Number.isInteger(width) || width < TEXT_WIDTH_MIN || width > TEXT_WIDTH_MAX) {
    throw new QuernError('config', `width must be an integer in ${TEXT_WIDTH_MIN}..${TEXT_WIDTH_MAX} (got ${width})`);
  }
  const c = report.corpus;
  const title = `Quern statistics — highest order ${c.highestOrder}, vocabulary ${formatCount(c.vocabularySize)}, ` +
    `${formatCount(c.tokens)} tokens in ${formatCount(c.sentences)} sentences`;
  const lines = [
    ...wrap(title, width),
    ...findingsSection(report.diagnostics, width),
    ...ordersSection(report.orders, width),
    ...countOfCountsSection(report.orders, width),
    ...goodTuringSection(report.orders, width),
    ...simpleGoodTuringSection(report.orders, width),
    ...discountsSection(report.orders, width),
    ...zipfSection(report, width),
  ];
  return `${lines.join('\n')}\n`;
}
