/**
 * TallyBuilder against count-of-counts made here with Maps from the same sorted rows: a row at a
 * time and in batches cut anywhere, with a checkpoint taken and resumed between
 * batches as a resumed merge does; counts and context sums past the dense range included.
 */
import { describe, expect, test } from 'vitest';
import { TallyBuilder, type OrderTally } from '../../src/merge/tally.ts';
import { seededRandom } from '../support/seeded.ts';

interface Rows {
  keys: Uint32Array;
  counts: Float64Array;
  n: number;
}

/** `n` distinct sorted rows of `order` ids (few contexts, id 0 = `<s>` often first), counts mostly small, some past 4,096. */
function sortedRows(seed: number, order: number, n: number): Rows {
  const random = seededRandom(seed);
  const seen = new Map<string, number[]>();
  while (seen.size < n) {
    const ids = Array.from({ length: order }, (_, k) => Math.floor(random() ** 2 * (k === order - 1 ? 5000 : 12)));
    seen.set(ids.join(' '), ids);
  }
  const rows = [...seen.values()].sort((a, b) => { for (let k = 0; k < order; k++) if (a[k] !== b[k]) return a[k] - b[k]; return 0; });
  const counts = Float64Array.from(rows, () => (random() < 0.01 ? 4096 + Math.floor(random() * 20_000) : 1 + Math.floor(random() ** 3 * 40)));
  return { keys: Uint32Array.from(rows.flat()), counts, n: rows.length };
}

function histogram(values: number[]): Array<[number, number]> {
  const map = new Map<number, number>();
  for (const v of values) map.set(v, (map.get(v) ?? 0) + 1);
  return [...map.entries()].sort((a, b) => a[0] - b[0]);
}

/** The tally by definition: n_r of the counts, of the contexts' sums, of the rows starting with `<s>`. */
function expectedTally(rows: Rows, order: number): OrderTally {
  const counts = Array.from(rows.counts);
  const sums = new Map<string, number>();
  for (let r = 0; r < rows.n; r++) {
    const context = Array.from(rows.keys.subarray(r * order, r * order + order - 1)).join(' ');
    if (order > 1) sums.set(context, (sums.get(context) ?? 0) + counts[r]);
  }
  return {
    order, distinct: rows.n, total: counts.reduce((a, b) => a + b, 0), raw: histogram(counts),
    contexts: histogram([...sums.values()]), contextCount: sums.size,
    bosRaw: histogram(counts.filter((_, r) => rows.keys[r * order] === 0)),
  };
}

describe('TallyBuilder', () => {
  for (const order of [1, 2, 3, 5]) {
    test(`order ${order}: a row at a time and in batches cut anywhere, resumed from checkpoints, give the tally by definition`, () => {
      const rows = sortedRows(order, order, order === 1 ? 3000 : 20_000); // order 1: at most 5,000 ids
      const expected = expectedTally(rows, order);
      expect(expected.raw.some(([r]) => r >= 4096)).toBe(true);
      if (order > 1) expect(expected.contexts.some(([r]) => r >= 4096)).toBe(true);
      expect(expected.bosRaw.length).toBeGreaterThan(0);

      const perRow = new TallyBuilder(order);
      for (let r = 0; r < rows.n; r++) perRow.addRows(rows.keys, rows.counts, r, r + 1);
      expect(perRow.finish()).toEqual(expected);

      const random = seededRandom(100 + order);
      let tally = new TallyBuilder(order);
      for (let first = 0; first < rows.n;) {
        const end = Math.min(rows.n, first + Math.floor(random() ** 2 * 3000));
        // An empty batch now and then; every other batch in arrays of its own, as the merge's
        // batches come (a row's context is then compared with the kept one, not the row before).
        if (random() < 0.5) tally.addRows(rows.keys, rows.counts, first, end);
        else tally.addRows(rows.keys.slice(first * order, end * order), rows.counts.slice(first, end), 0, end - first);
        if (random() < 0.3) tally = new TallyBuilder(order, JSON.parse(JSON.stringify(tally.checkpoint())));
        first = end;
      }
      expect(tally.finish()).toEqual(expected);

      // Counts as u32 (the continuation counts), rows one at a time.
      const one = new TallyBuilder(order);
      const counts32 = Uint32Array.from(rows.counts);
      for (let r = 0; r < rows.n; r++) one.addRows(rows.keys, counts32, r, r + 1);
      expect(one.finish()).toEqual(expected);
    });
  }

  test('addRows refuses a count below 1', () => {
    expect(() => new TallyBuilder(2).addRows(Uint32Array.from([1, 2, 1, 3]), Float64Array.from([1, 0]), 0, 2)).toThrow(/count 0 of a stored n-gram/);
  });
});
