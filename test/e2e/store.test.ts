/**
 * The count store after `quern count`: continuation counts against an independent computation
 * from the coreutils reference counts, prefix listing, and `quern report` on the same job.
 */
import { execFileSync, spawnSync } from 'node:child_process';
import * as path from 'node:path';
import { beforeAll, describe, expect, test } from 'vitest';
import { SyntheticModel, writeShardFile } from '../../scripts/lib/synthetic.ts';
import { referenceCountsByOrder } from '../support/reference-count.ts';
import { parseListing, REPO, runQuern, tempDir } from '../support/cli.ts';
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { NO_LOCAL_CONTINUATION_ENV } from '../../src/merge/continuation-stage.ts';
import { fusedOrders } from '../../src/merge/fused-continuation.ts';
import { MERGE_SCRATCH_DIR } from '../../src/merge/merge-partition.ts';
import { MERGE_FAN_IN_MAX, STORE_ADDRESS_SPACE_MIN } from '../../src/limits.ts';
import { addressSpaceLimit, checkStoreAddressSpace } from '../../src/merge/store.ts';
import { jobDigest } from '../support/crash.ts';

describe('count store', () => {
  let job: string;
  let corpus: string;
  let reference: Map<number, Map<string, number>>;
  beforeAll(async () => {
    const dir = tempDir();
    corpus = path.join(dir, 'corpus');
    execFileSync('mkdir', ['-p', corpus]);
    const model = new SyntheticModel({ seed: 9, vocabularyTypes: 5000, successorRanks: 1000, phraseCount: 500 });
    writeShardFile(model, 0, 400_000, path.join(corpus, 'a.txt'));
    writeShardFile(model, 1, 300_000, path.join(corpus, 'b.txt'));
    job = path.join(dir, 'job');
    const result = await runQuern(['count', corpus, '--job', job, '--order', '4', '--quiet', '--partitions', '5']);
    expect(result.stderr).toBe('');
    reference = referenceCountsByOrder([path.join(corpus, 'a.txt'), path.join(corpus, 'b.txt')], 4, { lowercase: false });
  });

  test('continuation counts N1+(• x) equal the number of distinct words before x (from the coreutils counts)', async () => {
    for (let m = 1; m <= 3; m++) {
      // Kneser-Ney's continuation count (Chen & Goodman 1998): |{w : c(w x) > 0}|, computed here
      // from the reference n-grams of order m+1 by dropping their first word.
      const expected = new Map<string, number>();
      for (const ngram of reference.get(m + 1)!.keys()) {
        const suffix = ngram.slice(ngram.indexOf(' ') + 1);
        expected.set(suffix, (expected.get(suffix) ?? 0) + 1);
      }
      const result = await runQuern(['ngrams', job, '--order', String(m), '--continuation']);
      expect(result.status).toBe(0);
      expect(parseListing(result.stdout)).toEqual(expected);
    }
  });

  test('continuation counts computed inside each partition equal those merged from emitted runs', async () => {
    // The job above has orders 2 and 3 made by its raw merge from the rows it merged
    // (fused-continuation.ts) and order 1 from the vectors that merge kept (suffix-vector.ts);
    // this one is forced through the emit-and-merge path for every order.
    const viaRuns = path.join(tempDir(), 'job');
    const result = await runQuern(['count', corpus, '--job', viaRuns, '--order', '4', '--quiet', '--partitions', '5'], { env: { [NO_LOCAL_CONTINUATION_ENV]: '1' } });
    expect(result.status).toBe(0);
    const manifest = (dir: string) => JSON.parse(readFileSync(path.join(dir, 'job.json'), 'utf8'));
    expect(manifest(job).stages.continuation.local).toEqual([[1, 2, 3], [1, 2, 3], [1, 2, 3], [1, 2, 3], [1, 2, 3]]);
    expect(manifest(job).stages.continuation.emitted.flatMap((e: { runs: unknown[] }) => e.runs)).toEqual([]);
    for (let p = 0; p < 5; p++) expect([...await fusedOrders(job, p)]).toEqual([2, 3]);
    for (let p = 0; p < 5; p++) expect([...await fusedOrders(viaRuns, p)]).toEqual([]);
    expect(manifest(viaRuns).stages.continuation.local).toEqual([[], [], [], [], []]);
    expect(manifest(viaRuns).stages.continuation.emitted.flatMap((e: { runs: Array<{ order: number }> }) => e.runs.map((r) => r.order))).toContain(3);
    expect(await jobDigest(viaRuns)).toEqual(await jobDigest(job));
    expect(readFileSync(path.join(viaRuns, 'stats.json'), 'utf8')).toBe(readFileSync(path.join(job, 'stats.json'), 'utf8'));
  });

  test('more runs per partition than a merge opens at once: merged in groups, within a limit of 240 open files, the same store and listing', async () => {
    // ~170 chunks of 4 KiB give each partition and order ~170 runs: opened all at once by two
    // merging workers, 340 files and more (EMFILE under this limit, as before MERGE_FAN_IN_MAX).
    const many = path.join(tempDir(), 'job');
    const args = ['count', corpus, '--job', many, '--order', '4', '--quiet', '--partitions', '5', '--workers', '2', '--chunk-size', '4KiB'];
    const result = spawnSync('bash', ['-c', 'ulimit -n 240 && exec "$0" "$@"', process.execPath, path.join(REPO, 'bin/quern.js'), ...args], { encoding: 'utf8' });
    expect(result.stderr).toBe('');
    expect(result.status).toBe(0);
    const manifest = JSON.parse(readFileSync(path.join(many, 'job.json'), 'utf8'));
    expect(manifest.chunks.length).toBeGreaterThan(2 * MERGE_FAN_IN_MAX);
    expect(await jobDigest(many)).toEqual(await jobDigest(job));
    expect(readFileSync(path.join(many, 'stats.json'), 'utf8')).toBe(readFileSync(path.join(job, 'stats.json'), 'utf8'));
    expect(existsSync(path.join(many, MERGE_SCRATCH_DIR))).toBe(false);

    // quern ngrams of that job as if its merge had not finished reads the runs of all partitions
    // (~850 of order 4): grouped too, the same listing as from the store.
    const manifestPath = path.join(many, 'job.json');
    const unmerged = JSON.parse(readFileSync(manifestPath, 'utf8'));
    unmerged.stages.merge.status = 'running';
    writeFileSync(manifestPath, JSON.stringify(unmerged));
    const listed = spawnSync('bash', ['-c', 'ulimit -n 240 && exec "$0" "$@"', process.execPath, path.join(REPO, 'bin/quern.js'), 'ngrams', many, '--order', '4'], { encoding: 'utf8', maxBuffer: 1 << 28 });
    expect(listed.stderr).toBe('');
    expect(listed.stdout).toBe((await runQuern(['ngrams', job, '--order', '4'])).stdout);
    expect(existsSync(path.join(many, MERGE_SCRATCH_DIR)), 'the listing removes its intermediate runs and their folder').toBe(false);
  });

  test('under an address-space limit too small for the store (ulimit -v 8 GB), quern count and quern ngrams refuse at once with the reason, instead of crashing inside LMDB', () => {
    // The compiled CLI: tsx, which runs the sources, itself fails under such a limit.
    if (spawnSync(process.execPath, [path.join(REPO, 'scripts/build.mjs'), '--check']).status !== 0) {
      process.stderr.write('store.test.ts: dist/ is not current (npm run build): quern under ulimit -v was not checked\n');
      return;
    }
    const limited = (args: string[]) => spawnSync('bash', ['-c', 'ulimit -v 8000000 && exec "$0" "$@"', process.execPath, path.join(REPO, 'bin/quern.js'), ...args], { encoding: 'utf8' });
    const fresh = path.join(tempDir(), 'job');
    const count = limited(['count', corpus, '--job', fresh, '--order', '2', '--quiet']);
    expect(count.signal).toBeNull();
    expect(count.status).toBe(6);
    expect(count.stderr).toMatch(/^quern: the count store maps 1 TiB of address space per partition .* may use 7\.6 GiB .* \(ulimit -v\): raise the limit/);
    expect(existsSync(fresh), 'refused before the job was begun').toBe(false);
    const listed = limited(['ngrams', job, '--order', '2', '--limit', '3']);
    expect(listed.signal).toBeNull();
    expect(listed.status).toBe(6);
    expect(listed.stderr).toMatch(/ulimit -v/);
  });

  test('the address-space limit is read from /proc/self/limits (Linux); none, unlimited or unreadable is no limit', () => {
    const limits = (soft: string): string => [
      'Limit                     Soft Limit           Hard Limit           Units     ',
      'Max stack size            8388608              unlimited            bytes     ',
      `Max address space         ${soft.padEnd(20)} unlimited            bytes     `,
      'Max file locks            unlimited            unlimited            locks     ',
    ].join('\n');
    expect(addressSpaceLimit(limits('8192000000'))).toBe(8_192_000_000);
    expect(addressSpaceLimit(limits('unlimited'))).toBeUndefined();
    expect(addressSpaceLimit('Max stack size 8388608 unlimited bytes')).toBeUndefined();
    expect(addressSpaceLimit(undefined)).toBeUndefined();
    expect(() => checkStoreAddressSpace(8_192_000_000)).toThrow(/ulimit -v unlimited/);
    expect(() => checkStoreAddressSpace(STORE_ADDRESS_SPACE_MIN)).not.toThrow();
    expect(() => checkStoreAddressSpace(undefined)).not.toThrow();
  });

  test('--prefix lists exactly the n-grams that start with the given words', async () => {
    const trigrams = reference.get(3)!;
    const [first] = [...trigrams.keys()].filter((k) => !k.startsWith('<s>'));
    const prefix = first.split(' ').slice(0, 2).join(' ');
    const expected = new Map([...trigrams].filter(([k]) => k.startsWith(prefix + ' ')));
    const result = await runQuern(['ngrams', job, '--order', '3', '--prefix', prefix]);
    expect(result.status).toBe(0);
    expect(parseListing(result.stdout)).toEqual(expected);
    const single = await runQuern(['ngrams', job, '--order', '3', '--prefix', first]);
    expect(parseListing(single.stdout)).toEqual(new Map([[first, trigrams.get(first)]]));
  });

  test('quern report: Σ r·n_r = occurrences at every order, and the continuation count-of-counts add up', async () => {
    const result = await runQuern(['report', job, '--json']);
    expect(result.stderr).toBe('');
    const report = JSON.parse(result.stdout);
    expect(report.orders).toHaveLength(4);
    for (const order of report.orders) {
      const expected = reference.get(order.order)!;
      const occurrences = [...expected.values()].reduce((a, b) => a + b, 0);
      expect(order.distinct).toBe(expected.size);
      expect(order.total).toBe(occurrences);
    }
    const text = await runQuern(['report', job]);
    expect(text.status).toBe(0);
    expect(text.stdout).toMatch(/Count-of-counts/);
  });
});
