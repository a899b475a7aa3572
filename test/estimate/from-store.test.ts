/** The count tables read from a job's store equal the tables counted in memory from the same text. */
import { execFileSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { countCorpus } from '../../src/estimate/counts.ts';
import { countTablesBytes, loadCountTables } from '../../src/estimate/from-store.ts';
import { estimate } from '../../src/estimate/estimate.ts';
import { logProb } from '../../src/estimate/model.ts';
import { REPO, runQuern, tempDir } from '../support/cli.ts';

describe('loadCountTables', () => {
  test('equal to in-memory counting of the sample logbooks, continuation counts included', async () => {
    const dir = tempDir();
    const text = readFileSync(path.join(REPO, 'sample-data/logbook/harbour-2026-a.txt'), 'utf8')
      + execFileSync('gzip', ['-dc', path.join(REPO, 'sample-data/logbook/harbour-2026-b.txt.gz')]).toString('utf8');
    const job = path.join(dir, 'job');
    const result = await runQuern(['count', path.join(REPO, 'sample-data/logbook'), '--job', job, '--order', '3', '--quiet', '--partitions', '4']);
    expect(result.stderr).toBe('');
    const fromStore = await loadCountTables(job, 1 << 30);
    const sentences = text.split('\n').map((l) => l.split(/\s+/).filter(Boolean)).filter((s) => s.length > 0);
    const inMemory = countCorpus(sentences, 3);
    expect(fromStore.vocabulary.words).toEqual(inMemory.vocabulary.words);
    for (let n = 0; n < 3; n++) {
      expect(fromStore.tables[n].ids).toEqual(inMemory.tables[n].ids);
      expect(fromStore.tables[n].counts).toEqual(inMemory.tables[n].counts);
      if (n < 2) expect(fromStore.tables[n].continuation).toEqual(inMemory.tables[n].continuation);
    }
    // The same tables give the same model (the templated sample text needs the fallback discounts).
    const a = estimate(fromStore, { fallback: true });
    const b = estimate(inMemory, { fallback: true });
    const ids = [0, 5, 9, 3];
    for (let w = 1; w < 40; w++) expect(logProb(a, ids, w).log10Prob).toBe(logProb(b, ids, w).log10Prob);
  });

  test('refuses a job whose tables do not fit the memory budget', async () => {
    expect(countTablesBytes([10, 100, 1000])).toBe(10 * 20 + 100 * 24 + 1000 * 20);
    const dir = tempDir();
    const job = path.join(dir, 'job');
    await runQuern(['count', path.join(REPO, 'sample-data/logbook'), '--job', job, '--order', '2', '--quiet']);
    await expect(loadCountTables(job, 1000)).rejects.toThrow(/raise --memory/);
  });
});
