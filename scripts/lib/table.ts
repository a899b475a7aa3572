/** Small helpers the benchmarks' reports share: a median, and a plain-text table. */

/** The median of `values` (the mean of the two middle ones for an even count). */
export function median(values: readonly number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const middle = sorted.length >> 1;
  return sorted.length % 2 === 1 ? sorted[middle] : (sorted[middle - 1] + sorted[middle]) / 2;
}

/** `rows` (the first a header) as lines of columns padded to their widest cell, two spaces apart;
 *  the columns in `rightAligned` padded on the left. */
export function renderTable(rows: string[][], rightAligned: ReadonlySet<number> = new Set()): string {
  const widths = rows[0].map((_, column) => Math.max(...rows.map((row) => row[column].length)));
  return rows
    .map((row) => row.map((cell, column) => (rightAligned.has(column) ? cell.padStart(widths[column]) : cell.padEnd(widths[column]))).join('  ').trimEnd())
    .join('\n');
}
