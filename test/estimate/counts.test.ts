/**
 * The in-memory counter against the coreutils reference (test/support/reference-count.ts), and its
 * continuation counts against their definition.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { checkCountTables, countCorpus, countSentences, rowCount, truncateCounts, withContinuationCounts, type CountTables } from '../../src/estimate/counts.ts';
import { referenceCountsByOrder } from '../support/reference-count.ts';
import { corpus, randomCorpus } from './support.ts';

const directory = mkdtempSync(join(tmpdir(), 'quern-estimate-counts-'));
afterAll(() => rmSync(directory, { recursive: true, force: true }));

/** The tables as text: order → n-gram words joined by spaces → count (and continuation count). */
function tablesAsText(counts: CountTables): Array<Map<string, number>> {
  return counts.tables.map((table) => {
    const map = new Map<string, number>();
    for (let row = 0; row < rowCount(table); row++) {
      const words = Array.from(table.ids.subarray(row * table.order, (row + 1) * table.order), (id) => counts.vocabulary.words[id]);
      map.set(words.join(' '), table.counts[row]);
    }
    return map;
  });
}

describe('in-memory counts', () => {
  test.each([
    ['hand-made', corpus('the ferry left at dawn\nthe ferry came back\nat dawn the gulls came\ngulls left\nthe the the')],
    ['random', randomCorpus(5, 300, 30, 14)],
  ])('equal the reference counter at orders 1..5 (%s corpus)', (name, sentences) => {
    const file = join(directory, `${name}.txt`);
    writeFileSync(file, sentences.map((words) => words.join(' ')).join('\n') + '\n');
    const reference = referenceCountsByOrder([file], 5, { lowercase: false });
    const counts = countCorpus(sentences, 5);
    checkCountTables(counts);
    const ours = tablesAsText(counts);
    for (let n = 1; n <= 5; n++) expect(ours[n - 1]).toEqual(reference.get(n));
  });

  test('continuation counts: N1+(• x) distinct words before x; 0 for n-grams that begin with <s>', () => {
    const sentences = randomCorpus(6, 200, 20, 10);
    const counts = countCorpus(sentences, 4);
    const text = tablesAsText(counts);
    for (let n = 1; n < 4; n++) {
      const table = counts.tables[n - 1];
      const before = new Map<string, Set<string>>();
      for (const key of text[n].keys()) {
        const words = key.split(' ');
        const suffix = words.slice(1).join(' ');
        if (!before.has(suffix)) before.set(suffix, new Set());
        before.get(suffix)!.add(words[0]);
      }
      let sum = 0;
      for (let row = 0; row < rowCount(table); row++) {
        const key = Array.from(table.ids.subarray(row * n, (row + 1) * n), (id) => counts.vocabulary.words[id]).join(' ');
        expect(table.continuation![row]).toBe(before.get(key)?.size ?? 0);
        if (key.startsWith('<s> ')) expect(table.continuation![row]).toBe(0);
        sum += table.continuation![row];
      }
      // Every n-gram of order n+1 adds one to exactly one suffix.
      expect(sum).toBe(rowCount(counts.tables[n]));
    }
    expect(counts.tables[3].continuation).toBeNull();
    // Computing them from the tables gives the same.
    const recomputed = withContinuationCounts({ ...counts, tables: counts.tables.map((table) => ({ ...table, continuation: null })) });
    for (let n = 1; n < 4; n++) expect(recomputed.tables[n - 1].continuation).toEqual(counts.tables[n - 1].continuation);
    // A lower-order view keeps them below its top order only.
    const order2 = truncateCounts(counts, 2);
    expect(order2.tables.map((table) => table.continuation === null)).toEqual([false, true]);
  });

  test('literal markers are unknown words; ids outside the vocabulary are refused', () => {
    const counts = countCorpus(corpus('a <s> b\n</s> a <unk>'), 2);
    const unigrams = tablesAsText(counts)[0];
    expect(unigrams.get('<unk>')).toBe(3);
    expect(unigrams.has('<s>')).toBe(false);
    expect(() => countSentences([[1, 99]], 2, counts.vocabulary)).toThrow(RangeError);
    expect(() => countSentences([[counts.vocabulary.eosId]], 2, counts.vocabulary)).toThrow(RangeError);
  });
});
