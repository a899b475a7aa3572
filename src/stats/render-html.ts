/**
 * HTML rendering of a statistics report: one self-contained page (inline CSS and SVG, no scripts,
 * no fonts or images fetched) that prints well in black and white.
 *
 * Charts: count-of-counts (log-log n_r against r, one series per order, each with its Simple
 * Good-Turing line), discounts by order, share of n-grams seen once by order, and the Zipf
 * rank-frequency plot. Every series has a colour (Okabe-Ito palette, safe for colour-blind readers)
 * and also its own marker shape, fill and dash pattern, so it reads without colour.
 *
 * Stable hooks for tests and tools: each chart is `<svg data-chart="…">`; each series a
 * `<g data-series="…" data-kind="points|line|fit">`; each plotted value an element with
 * `data-point="x,y"` inside its series. Every point is drawn, except in a series of more than
 * CHART_POINTS_PER_SERIES_MAX points, where a point landing on the pixel of an earlier one is not.
 */
import { smoothedCountOfCounts } from './good-turing.ts';
import type { Diagnostic } from './diagnostics.ts';
import { COUNT_OF_COUNTS_LISTED_R_MAX, binBounds } from './count-of-counts.ts';
import type { OrderReport, Report } from './report.ts';
import { formatCount, formatDecimal, formatObservedShare, formatShare } from './render-text.ts';
import type { ZipfFit } from './zipf.ts';

// ---- Escaping and small helpers ------------------------------------------------------------------

/** Escapes text for HTML and SVG content and attribute values. */
export function escapeHtml(text: string): string {
  return text.replace(/[&<>"']/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[c] as string);
}

/** A coordinate rounded for SVG output (two decimals keep files small and sub-pixel exact). */
function px(value: number): string {
  return String(Math.round(value * 100) / 100);
}

// ---- Series styles: colour, marker, fill and dash, distinct in black and white ------------------

/** Okabe & Ito's colour-blind-safe palette (black first, then the colours). */
const COLOURS = ['#0072B2', '#D55E00', '#009E73', '#CC79A7', '#E69F00', '#56B4E9', '#000000'];
const MARKERS = ['circle', 'square', 'triangle', 'diamond', 'triangle-down', 'plus', 'cross'] as const;
const DASHES = ['', '7 3', '2 3', '9 3 2 3', '1 2', '12 4', '5 2 1 2'];
type Marker = (typeof MARKERS)[number];

interface SeriesStyle {
  colour: string;
  marker: Marker;
  /** Filled marker, or hollow (white inside). */
  filled: boolean;
  dash: string;
}

/** The style of the `index`-th series of a chart. */
function styleOf(index: number): SeriesStyle {
  return {
    colour: COLOURS[index % COLOURS.length],
    marker: MARKERS[index % MARKERS.length],
    filled: index % 2 === 0,
    dash: DASHES[index % DASHES.length],
  };
}

const MARKER_RADIUS = 4;

/** SVG path data of a marker centred at (x, y). */
function markerPath(marker: Marker, x: number, y: number, size = MARKER_RADIUS): string {
  const s = size;
  switch (marker) {
    case 'circle':
      return `M${px(x - s)},${px(y)}a${s},${s} 0 1,0 ${2 * s},0a${s},${s} 0 1,0 ${-2 * s},0Z`;
    case 'square':
      return `M${px(x - s)},${px(y - s)}h${2 * s}v${2 * s}h${-2 * s}Z`;
    case 'triangle':
      return `M${px(x)},${px(y - s * 1.2)}L${px(x + s * 1.1)},${px(y + s * 0.8)}L${px(x - s * 1.1)},${px(y + s * 0.8)}Z`;
    case 'diamond':
      return `M${px(x)},${px(y - s * 1.3)}L${px(x + s)},${px(y)}L${px(x)},${px(y + s * 1.3)}L${px(x - s)},${px(y)}Z`;
    case 'triangle-down':
      return `M${px(x)},${px(y + s * 1.2)}L${px(x + s * 1.1)},${px(y - s * 0.8)}L${px(x - s * 1.1)},${px(y - s * 0.8)}Z`;
    case 'plus':
      return `M${px(x - s * 1.2)},${px(y)}h${px(2.4 * s)}M${px(x)},${px(y - s * 1.2)}v${px(2.4 * s)}`;
    case 'cross':
      return `M${px(x - s)},${px(y - s)}l${2 * s},${2 * s}M${px(x - s)},${px(y + s)}l${2 * s},${-2 * s}`;
  }
}

/** A marker element: stroked-only shapes (plus, cross) get no fill. */
function markerElement(style: SeriesStyle, x: number, y: number, attributes: string, title: string): string {
  const open = style.marker === 'plus' || style.marker === 'cross';
  const fill = open ? 'none' : style.filled ? style.colour : '#ffffff';
  return `<path${attributes} d="${markerPath(style.marker, x, y)}" fill="${fill}" stroke="${style.colour}" stroke-width="1.5"><title>${escapeHtml(title)}</title></path>`;
}

// ---- Scales and ticks -------------------------------------------------------------------------------

interface Scale {
  /** Data value → pixel. */
  at(value: number): number;
  ticks: Array<{ value: number; label: string }>;
}

/** Points of one series drawn one by one; a series with more (a large corpus has thousands of
 *  distinct r) draws each pixel once, which looks the same and keeps the page small. */
export const CHART_POINTS_PER_SERIES_MAX = 1000;

/** Geometry of every chart: a fixed view box, scaled down by CSS on narrow pages. */
const CHART = { width: 860, height: 440, left: 78, right: 640, top: 24, bottom: 372, legendX: 662 };

/** A tick label of a power of ten: plain up to 100,000, as 10 with a superscript above. */
function powerLabel(exponent: number): string {
  if (exponent >= 0 && exponent <= 5) return formatCount(10 ** exponent);
  if (exponent < 0 && exponent >= -3) return String(10 ** exponent);
  return `10<tspan dy="-5" font-size="9">${exponent}</tspan>`;
}

/** Pixels kept free between the frame and the outermost ticks, so markers there stay whole. */
const SCALE_PADDING_PX = 10;

/** The pixel range [from, to] shrunk by SCALE_PADDING_PX at both ends (either direction). */
function padded(from: number, to: number): [number, number] {
  const pad = Math.sign(to - from) * SCALE_PADDING_PX;
  return [from + pad, to - pad];
}

/** Logarithmic scale over [min, max] (both > 0), from one power of ten to another. */
function logScale(min: number, max: number, fromPx: number, toPx: number): Scale {
  const [from, to] = padded(fromPx, toPx);
  const low = Math.floor(Math.log10(min));
  let high = Math.ceil(Math.log10(max));
  if (high === low) high += 1;
  const at = (value: number): number => from + ((Math.log10(value) - low) / (high - low)) * (to - from);
  const ticks: Scale['ticks'] = [];
  for (let exponent = low; exponent <= high; exponent++) ticks.push({ value: 10 ** exponent, label: powerLabel(exponent) });
  if (high - low <= 2) {
    for (let exponent = low; exponent < high; exponent++) {
      for (const m of [2, 5]) ticks.push({ value: m * 10 ** exponent, label: formatDecimal(m * 10 ** exponent, 3) });
    }
  }
  return { at, ticks };
}

/** Linear scale over [min, max] with about five round ticks (steps of 1, 2 or 5 × 10^k). */
function linearScale(min: number, max: number, fromPx: number, toPx: number): Scale {
  const [from, to] = padded(fromPx, toPx);
  if (max === min) max = min + 1;
  const roughStep = (max - min) / 5;
  const magnitude = 10 ** Math.floor(Math.log10(roughStep));
  const step = [1, 2, 5, 10].map((m) => m * magnitude).find((s) => s >= roughStep) as number;
  const low = Math.floor(min / step) * step;
  const high = Math.ceil(max / step) * step;
  const at = (value: number): number => from + ((value - low) / (high - low)) * (to - from);
  const ticks: Scale['ticks'] = [];
  for (let i = 0; low + i * step <= high + step / 1e6; i++) {
    const value = Math.round((low + i * step) / step) * step;
    ticks.push({ value, label: formatDecimal(value, 3) });
  }
  return { at, ticks };
}

/** Scale for orders 1..count, half a step of room at each end. */
function orderScale(count: number, from: number, to: number): Scale {
  const at = (value: number): number => from + ((value - 0.5) / count) * (to - from);
  return { at, ticks: Array.from({ length: count }, (_, i) => ({ value: i + 1, label: String(i + 1) })) };
}

// ---- Generic chart ----------------------------------------------------------------------------------

interface ChartPoint {
  x: number;
  y: number;
  /** Tooltip text. */
  label: string;
}

interface ChartSeries {
  /** Stable id, the `data-series` value. */
  id: string;
  /** Legend text. */
  label: string;
  /** points: markers only; line: markers joined by a line (broken at gaps); fit: a line only. */
  kind: 'points' | 'line' | 'fit';
  /** For 'line', null breaks the line. */
  points: Array<ChartPoint | null>;
  style: SeriesStyle;
}

interface ChartSpec {
  id: string;
  title: string;
  xTitle: string;
  yTitle: string;
  x: Scale;
  y: Scale;
  series: ChartSeries[];
  /** A horizontal reference line, e.g. a range limit (value and label). */
  references?: Array<{ value: number; label: string }>;
}

/** Renders one chart as an inline SVG element. */
function renderChart(spec: ChartSpec): string {
  const { left, right, top, bottom } = CHART;
  const parts: string[] = [];
  const titleId = `chart-title-${spec.id}`;
  parts.push(
    `<svg xmlns="http://www.w3.org/2000/svg" data-chart="${spec.id}" role="img" aria-labelledby="${titleId}" ` +
      `viewBox="0 0 ${CHART.width} ${CHART.height}" width="${CHART.width}" height="${CHART.height}" class="chart">`,
    `<title id="${titleId}">${escapeHtml(spec.title)}</title>`,
    `<defs><clipPath id="clip-${spec.id}"><rect x="${left}" y="${top}" width="${right - left}" height="${bottom - top}"/></clipPath></defs>`,
    `<rect x="${left}" y="${top}" width="${right - left}" height="${bottom - top}" fill="#ffffff" stroke="#444444"/>`,
  );

  // Grid, ticks and tick labels.
  parts.push('<g class="axis" data-axis="x" font-size="11" text-anchor="middle">');
  for (const tick of spec.x.ticks) {
    const x = spec.x.at(tick.value);
    parts.push(`<line x1="${px(x)}" y1="${top}" x2="${px(x)}" y2="${bottom}" stroke="#e3e3e3"/>`);
    parts.push(`<line x1="${px(x)}" y1="${bottom}" x2="${px(x)}" y2="${bottom + 5}" stroke="#444444"/>`);
    parts.push(`<text x="${px(x)}" y="${bottom + 18}">${tick.label}</text>`);
  }
  parts.push(`<text class="axis-title" x="${px((left + right) / 2)}" y="${bottom + 44}" font-size="13">${escapeHtml(spec.xTitle)}</text></g>`);
  parts.push('<g class="axis" data-axis="y" font-size="11" text-anchor="end">');
  for (const tick of spec.y.ticks) {
    const y = spec.y.at(tick.value);
    parts.push(`<line x1="${left}" y1="${px(y)}" x2="${right}" y2="${px(y)}" stroke="#e3e3e3"/>`);
    parts.push(`<line x1="${left - 5}" y1="${px(y)}" x2="${left}" y2="${px(y)}" stroke="#444444"/>`);
    parts.push(`<text x="${left - 8}" y="${px(y + 4)}">${tick.label}</text>`);
  }
  const yMiddle = px((top + bottom) / 2);
  parts.push(`<text class="axis-title" x="18" y="${yMiddle}" font-size="13" text-anchor="middle" transform="rotate(-90 18 ${yMiddle})">${escapeHtml(spec.yTitle)}</text></g>`);

  for (const reference of spec.references ?? []) {
    const y = spec.y.at(reference.value);
    parts.push(
      `<g class="reference"><line x1="${left}" y1="${px(y)}" x2="${right}" y2="${px(y)}" stroke="#777777" stroke-dasharray="1 3"/>` +
        `<text x="${right - 4}" y="${px(y - 4)}" font-size="10" text-anchor="end" fill="#555555">${escapeHtml(reference.label)}</text></g>`,
    );
  }

  // Series: lines first (clipped to the plot area), markers on top.
  for (const series of spec.series) {
    const { style } = series;
    parts.push(`<g data-series="${escapeHtml(series.id)}" data-kind="${series.kind}">`);
    if (series.kind !== 'points') {
      let d = '';
      let penDown = false;
      for (const point of series.points) {
        if (point === null) {
          penDown = false;
          continue;
        }
        d += `${penDown ? 'L' : 'M'}${px(spec.x.at(point.x))},${px(spec.y.at(point.y))}`;
        penDown = true;
      }
      if (d.length > 0) {
        const dash = style.dash === '' ? '' : ` stroke-dasharray="${style.dash}"`;
        parts.push(`<path d="${d}" fill="none" stroke="${style.colour}" stroke-width="${series.kind === 'fit' ? 1.5 : 2}"${dash} clip-path="url(#clip-${spec.id})"/>`);
      }
    }
    if (series.kind !== 'fit') {
      const thinned = series.points.length > CHART_POINTS_PER_SERIES_MAX;
      const drawn = new Set<string>();
      for (const point of series.points) {
        if (point === null) continue;
        const x = spec.x.at(point.x);
        const y = spec.y.at(point.y);
        if (thinned) {
          const pixel = `${Math.round(x)},${Math.round(y)}`;
          if (drawn.has(pixel)) continue;
          drawn.add(pixel);
        }
        parts.push(markerElement(style, x, y, ` data-point="${point.x},${point.y}"`, point.label));
      }
    }
    parts.push('</g>');
  }

  // Legend: a line sample with the marker, then the label.
  parts.push(`<g class="legend" font-size="12">`);
  spec.series.forEach((series, index) => {
    const y = top + 10 + index * 20;
    const x = CHART.legendX;
    const { style } = series;
    const dash = style.dash === '' ? '' : ` stroke-dasharray="${style.dash}"`;
    const line = series.kind === 'points' ? '' : `<line x1="${x}" y1="${y}" x2="${x + 30}" y2="${y}" stroke="${style.colour}" stroke-width="2"${dash}/>`;
    const marker = series.kind === 'fit' ? '' : markerElement(style, x + 15, y, '', series.label);
    parts.push(`<g data-legend="${escapeHtml(series.id)}">${line}${marker}<text x="${x + 38}" y="${y + 4}">${escapeHtml(series.label)}</text></g>`);
  });
  parts.push('</g></svg>');
  return parts.join('\n');
}

// ---- The report's charts ----------------------------------------------------------------------------

/** Log-log n_r against r for each order's raw counts, with the Simple Good-Turing line. */
function countOfCountsChart(orders: OrderReport[]): string | null {
  const withCounts = orders.filter((o) => o.raw.pairs.length > 0);
  if (withCounts.length === 0) return null;
  const rMax = Math.max(...withCounts.map((o) => o.raw.rMax));
  const nMax = Math.max(...withCounts.flatMap((o) => o.raw.pairs.map(([, n]) => n)));
  const x = logScale(1, Math.max(rMax, 10), CHART.left, CHART.right);
  const y = logScale(1, Math.max(nMax, 10), CHART.bottom, CHART.top);
  const series: ChartSeries[] = [];
  withCounts.forEach((o, index) => {
    const style = styleOf(index);
    series.push({
      id: `order-${o.order}`,
      label: `order ${o.order}`,
      kind: 'points',
      points: o.raw.pairs.map(([r, n]) => ({ x: r, y: n, label: `order ${o.order}: n${r} = ${formatCount(n)}` })),
      style,
    });
    const sgt = o.simpleGoodTuring;
    if (sgt.status === 'fitted') {
      series.push({
        id: `order-${o.order}-fit`,
        label: `order ${o.order} SGT line`,
        kind: 'fit',
        points: [1, o.raw.rMax].map((r) => ({ x: r, y: smoothedCountOfCounts(sgt, r), label: '' })),
        style,
      });
    }
  });
  return renderChart({
    id: 'count-of-counts',
    title: 'Count-of-counts by order (raw counts), with the Simple Good-Turing lines',
    xTitle: 'r (times an n-gram was seen)',
    yTitle: 'n_r (distinct n-grams seen r times)',
    x,
    y,
    series,
  });
}

/** Absolute D and modified Kneser-Ney D1, D2, D3+ by order. */
function discountsChart(orders: OrderReport[]): string | null {
  if (orders.length === 0) return null;
  const definitions: Array<{ id: string; label: string; value: (o: OrderReport) => number | null }> = [
    { id: 'absolute', label: 'absolute D (raw)', value: (o) => o.discounts.absolute.discount },
    { id: 'd1', label: 'mod. KN D1', value: (o) => o.discounts.modifiedKneserNey.d1 },
    { id: 'd2', label: 'mod. KN D2', value: (o) => o.discounts.modifiedKneserNey.d2 },
    { id: 'd3plus', label: 'mod. KN D3+', value: (o) => o.discounts.modifiedKneserNey.d3Plus },
  ];
  const values = orders.flatMap((o) => definitions.map((d) => d.value(o))).filter((v): v is number => v !== null);
  const y = linearScale(Math.min(0, ...values), Math.max(3, ...values), CHART.bottom, CHART.top);
  const series = definitions.map((d, index): ChartSeries => ({
    id: d.id,
    label: d.label,
    kind: 'line',
    points: orders.map((o) => {
      const value = d.value(o);
      return value === null ? null : { x: o.order, y: value, label: `order ${o.order}: ${d.label} = ${formatDecimal(value)}` };
    }),
    style: styleOf(index),
  }));
  return renderChart({
    id: 'discounts',
    title: 'Discounts by order',
    xTitle: 'order',
    yTitle: 'discount (count units)',
    x: orderScale(orders.length, CHART.left, CHART.right),
    y,
    series,
    references: [
      { value: 1, label: 'D, D1 < 1' },
      { value: 2, label: 'D2 < 2' },
      { value: 3, label: 'D3+ < 3' },
    ],
  });
}

/** Share of distinct n-grams seen once, by order, raw and continuation counts. */
function singletonChart(orders: OrderReport[]): string | null {
  if (orders.length === 0) return null;
  const series: ChartSeries[] = [
    {
      id: 'raw',
      label: 'raw counts',
      kind: 'line',
      points: orders.map((o) => (o.raw.singletonShare === null ? null : { x: o.order, y: o.raw.singletonShare, label: `order ${o.order}, raw: ${formatShare(o.raw.singletonShare)}` })),
      style: styleOf(0),
    },
  ];
  if (orders.some((o) => o.continuation !== null)) {
    series.push({
      id: 'continuation',
      label: 'continuation counts',
      kind: 'line',
      points: orders.map((o) => {
        const share = o.continuation?.singletonShare ?? null;
        return share === null ? null : { x: o.order, y: share, label: `order ${o.order}, continuation: ${formatShare(share)}` };
      }),
      style: styleOf(1),
    });
  }
  const y = linearScale(0, 1, CHART.bottom, CHART.top);
  y.ticks = y.ticks.map((tick) => ({ value: tick.value, label: formatShare(tick.value) }));
  return renderChart({
    id: 'singleton-share',
    title: 'Share of distinct n-grams seen once, by order',
    xTitle: 'order',
    yTitle: 'n1 / distinct n-grams',
    x: orderScale(orders.length, CHART.left, CHART.right),
    y,
    series,
  });
}

/** Rank-frequency plot of the unigram counts (the report's log-spaced curve) with the Zipf line. */
function zipfChart(zipf: ZipfFit | null): string | null {
  if (zipf === null) return null;
  const points: ChartPoint[] = zipf.curve.map(([rank, count]) => ({ x: rank, y: count, label: `rank ${formatCount(rank)}: count ${formatCount(count)}` }));
  const rankLast = zipf.curve[zipf.curve.length - 1][0];
  const x = logScale(1, Math.max(rankLast, 10), CHART.left, CHART.right);
  const y = logScale(1, Math.max(zipf.curve[0][1], 10), CHART.bottom, CHART.top);
  const line = (rank: number): ChartPoint => ({ x: rank, y: 10 ** (zipf.interceptLog10 - zipf.exponent * Math.log10(rank)), label: '' });
  return renderChart({
    id: 'zipf',
    title: 'Word counts by rank',
    xTitle: 'rank',
    yTitle: 'count',
    x,
    y,
    series: [
      { id: 'unigrams', label: 'words', kind: 'points', points, style: styleOf(0) },
      { id: 'unigrams-fit', label: `fit, s = ${formatDecimal(zipf.exponent, 3)}`, kind: 'fit', points: [line(1), line(zipf.rankMax)], style: styleOf(1) },
    ],
  });
}

// ---- Tables and sections -------------------------------------------------------------------------------

function htmlTable(headers: string[], rows: string[][], caption: string): string {
  const head = headers.map((h, i) => `<th${i === 0 ? ' scope="col" class="label"' : ' scope="col"'}>${escapeHtml(h)}</th>`).join('');
  const body = rows.map((row) => `<tr>${row.map((cell, i) => (i === 0 ? `<th scope="row" class="label">${escapeHtml(cell)}</th>` : `<td>${escapeHtml(cell)}</td>`)).join('')}</tr>`).join('\n');
  return `<table><caption>${escapeHtml(caption)}</caption><thead><tr>${head}</tr></thead><tbody>\n${body}\n</tbody></table>`;
}

const dash = (value: number | null, format: (v: number) => string = formatDecimal): string => (value === null ? '—' : format(value));

function findingsHtml(diagnostics: Diagnostic[]): string {
  const items = diagnostics.map((d) => {
    const values = Object.entries(d.values)
      .map(([name, value]) => `<span class="value"><span class="name">${escapeHtml(name)}</span> ${value === null ? '—' : escapeHtml(formatDecimal(value, 6))}</span>`)
      .join(' ');
    const action = d.action === null ? '' : `<p class="action">${escapeHtml(d.action)}</p>`;
    return (
      `<li class="finding ${d.severity}" data-diagnostic="${d.code}" data-severity="${d.severity}">` +
      `<p class="finding-title"><span class="severity">${d.severity}</span> ${escapeHtml(d.title)}</p>` +
      `<p>${escapeHtml(d.message)}</p>${action}<p class="values">${values}</p></li>`
    );
  });
  return `<section id="findings"><h2>Findings</h2><ul class="findings">\n${items.join('\n')}\n</ul></section>`;
}

function tablesHtml(report: Report): string {
  const orders = report.orders;
  const ordersTable = htmlTable(
    ['order', 'distinct', 'occurrences', 'log10 V^n', 'observed share', 'seen once (raw)', 'seen once (cont.)', 'unseen mass n1/N'],
    orders.map((o) => [
      String(o.order),
      formatCount(o.distinct),
      formatCount(o.total),
      dash(o.possibleLog10, (v) => v.toFixed(2)),
      formatObservedShare(o),
      dash(o.raw.singletonShare, formatShare),
      dash(o.continuation?.singletonShare ?? null, formatShare),
      dash(o.unseenMass, formatShare),
    ]),
    'Orders',
  );
  const rMax = Math.max(0, ...orders.flatMap((o) => [o.raw.rMax, o.continuation?.rMax ?? 0]));
  const bounds = binBounds(rMax);
  const columns = orders.flatMap((o) => [
    { header: `order ${o.order} raw`, summary: o.raw },
    ...(o.continuation === null ? [] : [{ header: `order ${o.order} cont.`, summary: o.continuation }]),
  ]);
  const cocRows: string[][] = [];
  for (let r = 1; r <= COUNT_OF_COUNTS_LISTED_R_MAX; r++) cocRows.push([String(r), ...columns.map((c) => formatCount(c.summary.listed[r - 1]))]);
  bounds.forEach(([rMin, rEnd], index) => cocRows.push([`${rMin}–${rEnd - 1}`, ...columns.map((c) => formatCount(c.summary.bins[index]?.types ?? 0))]));
  const cocTable = htmlTable(['r', ...columns.map((c) => c.header)], cocRows, 'Count-of-counts n_r (from r = 11 summed over bins)');
  const discountsTable = htmlTable(
    ['order', 'counts', 'D1', 'D2', 'D3+', 'absolute D', 'Katz d1', 'd2', 'd3', 'd4', 'd5'],
    orders.map((o) => {
      const kn = o.discounts.modifiedKneserNey;
      return [String(o.order), o.discounts.kneserNeySource, dash(kn.d1), dash(kn.d2), dash(kn.d3Plus), dash(o.discounts.absolute.discount),
        ...o.discounts.katz.discounts.map((d) => dash(d.ratio))];
    }),
    'Discounts: modified Kneser-Ney (Chen & Goodman 1998), absolute (Ney, Essen & Kneser 1994), Katz (1987)',
  );
  const gtTable = htmlTable(
    ['order', 'r* r=1', 'r=2', 'r=3', 'r=4', 'r=5', 'SGT P0', 'SGT slope b', 'SGT smoothed from r'],
    orders.map((o) => {
      const sgt = o.simpleGoodTuring;
      const fitted = sgt.status === 'fitted';
      return [String(o.order), ...o.goodTuring.map((e) => dash(e.rStar)),
        fitted ? formatShare(sgt.unseenMass) : '—', fitted ? formatDecimal(sgt.slope) + (sgt.slopeWarning ? ' (> −1!)' : '') : '—', fitted ? dash(sgt.switchR, formatCount) : '—'];
    }),
    'Good-Turing r* = (r+1)·n(r+1)/n(r), and the Simple Good-Turing fit (Gale & Sampson 1995), raw counts',
  );
  return `<section id="tables"><h2>Tables</h2>\n${ordersTable}\n${cocTable}\n${gtTable}\n${discountsTable}\n</section>`;
}

const STYLE = `
body { font-family: system-ui, -apple-system, "Segoe UI", Helvetica, Arial, sans-serif; margin: 1.5rem auto; max-width: 960px; color: #1a1a1a; line-height: 1.4; padding: 0 1rem; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; } h2 { font-size: 1.2rem; border-bottom: 1px solid #ccc; padding-bottom: 0.2rem; margin-top: 2rem; }
.corpus { color: #444; margin-top: 0; }
ul.findings { list-style: none; padding: 0; }
li.finding { border-left: 6px solid #888; padding: 0.3rem 0.8rem; margin: 0.6rem 0; background: #fafafa; }
li.finding.problem { border-left: 6px double #b00020; } li.finding.warning { border-left: 6px dashed #b36b00; } li.finding.info { border-left: 6px dotted #555; }
li.finding p { margin: 0.2rem 0; } .finding-title { font-weight: 600; }
.severity { text-transform: uppercase; font-size: 0.75rem; letter-spacing: 0.05em; border: 1px solid currentColor; padding: 0 0.3rem; margin-right: 0.3rem; }
.action { font-style: italic; } .values { font-size: 0.8rem; color: #444; } .value { margin-right: 0.8rem; white-space: nowrap; } .value .name { font-family: ui-monospace, monospace; }
figure { margin: 1.2rem 0; } figcaption { font-size: 0.9rem; color: #333; }
svg.chart { max-width: 100%; height: auto; font-family: system-ui, -apple-system, Helvetica, Arial, sans-serif; }
table { border-collapse: collapse; margin: 1rem 0; font-size: 0.85rem; font-variant-numeric: tabular-nums; }
caption { text-align: left; font-weight: 600; padding-bottom: 0.3rem; }
th, td { padding: 0.15rem 0.6rem; text-align: right; border-bottom: 1px solid #e5e5e5; } th.label { text-align: left; }
@media print { body { max-width: none; } li.finding { background: none; } figure { break-inside: avoid; } }
`;

/** Renders `report` as one self-contained HTML page (see the module comment). */
export function renderHtml(report: Report): string {
  const c = report.corpus;
  const figures = [
    { chart: countOfCountsChart(report.orders), caption: 'n_r against r on log scales, one marker shape per order; each line is that order’s Simple Good-Turing fit S(r) = e^a·r^b (of the averaged Z_r, so it runs below the points where r values are sparse).' },
    { chart: discountsChart(report.orders), caption: 'Discounts each method would subtract, by order; dotted rules mark the upper limits; missing points are undefined discounts. D1 equals D wherever both come from the same counts (1 − 2Y·n2/n1 = n1/(n1 + 2·n2)).' },
    { chart: singletonChart(report.orders), caption: 'Share of the distinct n-grams seen exactly once, by order.' },
    { chart: zipfChart(report.zipf), caption: 'Word counts against rank on log scales, with the least-squares Zipf line over the top ranks.' },
  ]
    .filter((f) => f.chart !== null)
    .map((f) => `<figure>\n${f.chart}\n<figcaption>${escapeHtml(f.caption)}</figcaption></figure>`);
  return [
    '<!DOCTYPE html>',
    '<html lang="en"><head><meta charset="utf-8">',
    '<meta name="viewport" content="width=device-width, initial-scale=1">',
    `<title>Quern statistics — order ${c.highestOrder}</title>`,
    `<style>${STYLE}</style></head><body>`,
    '<header><h1>Quern statistics</h1>',
    `<p class="corpus">Highest order ${c.highestOrder} · vocabulary ${formatCount(c.vocabularySize)} · ${formatCount(c.tokens)} tokens · ${formatCount(c.sentences)} sentences · report schema ${report.schemaVersion}</p></header>`,
    findingsHtml(report.diagnostics),
    `<section id="charts"><h2>Charts</h2>\n${figures.join('\n')}\n</section>`,
    tablesHtml(report),
    '</body></html>',
    '',
  ].join('\n');
}
