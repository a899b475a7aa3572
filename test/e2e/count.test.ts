/**
 * `quern count` and `quern ngrams` as a user runs them, checked against an independent count made
 * by GNU coreutils (awk | LC_ALL=C sort | uniq -c: the everyday way of counting in the trade).
 */
import { execFileSync } from 'node:child_process';
import { readFileSync, statSync, writeFileSync } from 'node:fs';
import { gzipSync } from 'node:zlib';
import * as path from 'node:path';
import { beforeAll, describe, expect, test } from 'vitest';
import { SyntheticModel, writeShardFile } from '../../scripts/lib/synthetic.ts';
import { referenceCountsByOrder } from '../support/reference-count.ts';
import { parseListing, REPO, runQuern, tempDir } from '../support/cli.ts';

const SAMPLE = path.join(REPO, 'sample-data');

async function listAll(job: string, order: number): Promise<Map<number, Map<string, number>>> {
  const byOrder = new Map<number, Map<string, number>>();
  for (let n = 1; n <= order; n++) {
    const result = await runQuern(['ngrams', job, '--order', String(n)]);
    expect(result.stderr).toBe('');
    expect(result.status).toBe(0);
    byOrder.set(n, parseListing(result.stdout));
  }
  return byOrder;
}

/** `<unk>` is in the vocabulary with count 0 when nothing was capped; listings show seen n-grams only. */
function withoutZero(map: Map<string, number>): Map<string, number> {
  return new Map([...map].filter(([, c]) => c > 0));
}

describe('count on the sample data', () => {
  let dir: string;
  let plain: string;
  beforeAll(() => {
    dir = tempDir();
    // The reference reads plain text: decompress the gzip shard and pull the JSONL text fields out.
    const texts: string[] = [];
    for (const line of readFileSync(path.join(SAMPLE, 'dispatch.jsonl'), 'utf8').split('\n')) {
      if (line.trim()) texts.push((JSON.parse(line) as { body: { text: string } }).body.text);
    }
    plain = path.join(dir, 'plain.txt');
    const gz = execFileSync('gzip', ['-dc', path.join(SAMPLE, 'logbook/harbour-2026-b.txt.gz')], { maxBuffer: 1 << 26 }).toString('utf8');
    writeFileSync(plain, [readFileSync(path.join(SAMPLE, 'logbook/harbour-2026-a.txt'), 'utf8').replace(/\n?$/, '\n'), gz.replace(/\n?$/, '\n'), texts.join('\n') + '\n'].join(''));
  });

  test('every n-gram count of orders 1..4 equals the coreutils count (txt, txt.gz, nested JSONL field)', async () => {
    const job = path.join(dir, 'job');
    const result = await runQuern(['count', path.join(SAMPLE, 'logbook'), path.join(SAMPLE, 'dispatch.jsonl'), '--text-field', 'body.text', '--job', job, '--order', '4', '--quiet', '--json']);
    expect(result.stderr).toBe('');
    expect(result.status).toBe(0);
    const summary = JSON.parse(result.stdout);
    const reference = referenceCountsByOrder([plain], 4, { lowercase: false });
    const ours = await listAll(job, 4);
    for (let n = 1; n <= 4; n++) {
      expect(withoutZero(ours.get(n)!)).toEqual(reference.get(n));
      expect(summary.distinct[n - 1]).toBe(reference.get(n)!.size);
    }
    // A fact of the trade (common practice): V types allow V^n n-grams of order n, so the distinct
    // n-grams of order n never exceed min(V^n, occurrences).
    for (let n = 1; n <= 4; n++) {
      expect(summary.distinct[n - 1]).toBeLessThanOrEqual(Math.min(summary.vocabularySize ** n, summary.occurrences[n - 1]));
    }
    expect(summary.inputs).toBe(3);
  });

  test('lines are accounted for: sentences + empty lines = lines for plain text', async () => {
    const job = path.join(dir, 'job-lines');
    const result = await runQuern(['count', path.join(SAMPLE, 'logbook'), '--job', job, '--order', '2', '--quiet', '--json']);
    expect(result.status).toBe(0);
    const summary = JSON.parse(result.stdout);
    const text = readFileSync(path.join(SAMPLE, 'logbook/harbour-2026-a.txt'), 'utf8')
      + execFileSync('gzip', ['-dc', path.join(SAMPLE, 'logbook/harbour-2026-b.txt.gz')]).toString('utf8');
    const lines = text.split('\n').filter((_, i, all) => i < all.length - 1 || all[i] !== '').length;
    expect(summary.lines).toBe(lines);
    expect(summary.sentences + summary.emptyLines).toBe(summary.lines);
  });
});

describe('count on a generated corpus', () => {
  let corpus: string;
  let dir: string;
  beforeAll(() => {
    dir = tempDir();
    corpus = path.join(dir, 'corpus');
    execFileSync('mkdir', ['-p', corpus]);
    const model = new SyntheticModel({ seed: 5, vocabularyTypes: 20000 });
    for (let shard = 0; shard < 3; shard++) writeShardFile(model, shard, 700_000, path.join(corpus, `shard-${shard}.txt`));
  });

  test('order 5 matches coreutils, and counts do not depend on --workers or --memory', async () => {
    const big = path.join(dir, 'one-worker');
    const small = path.join(dir, 'two-workers-spilling');
    const one = await runQuern(['count', corpus, '--job', big, '--order', '5', '--workers', '1', '--memory', '2GiB', '--quiet', '--json']);
    expect(one.stderr).toBe('');
    // A budget small enough to force many spills, and chunks of 256 KiB so one file feeds both workers.
    const two = await runQuern(['count', corpus, '--job', small, '--order', '5', '--workers', '2', '--memory', '12MiB', '--chunk-size', '256KiB', '--quiet', '--json']);
    expect(two.stderr).toBe('');
    const a = JSON.parse(one.stdout);
    const b = JSON.parse(two.stdout);
    expect(a.spills).toBe(0);
    expect(b.spills).toBeGreaterThan(5);
    expect(b.distinct).toEqual(a.distinct);
    const listA = await listAll(big, 5);
    const listB = await listAll(small, 5);
    const reference = referenceCountsByOrder(['shard-0.txt', 'shard-1.txt', 'shard-2.txt'].map((f) => path.join(corpus, f)), 5, { lowercase: false });
    for (let n = 1; n <= 5; n++) {
      expect(withoutZero(listA.get(n)!)).toEqual(reference.get(n));
      expect(listB.get(n)).toEqual(listA.get(n));
    }
  }, 120_000);

  test('one large gzip input is counted in ranges of its text on every worker: the counts of its plain text', async () => {
    // The three shards as one gzip file, counted in 256 KiB ranges of its text on two workers: the
    // plain shards' counts. (Each range read alone, as --no-token-files reads them: text-pieces.test.ts.)
    const zipped = path.join(dir, 'all.txt.gz');
    writeFileSync(zipped, gzipSync(Buffer.concat(['shard-0.txt', 'shard-1.txt', 'shard-2.txt'].map((f) => readFileSync(path.join(corpus, f))))));
    const reference = await listAll(path.join(dir, 'one-worker'), 3);
    {
      const job = path.join(dir, 'gzip-ranges');
      const result = await runQuern(['count', zipped, '--job', job, '--order', '3', '--workers', '2', '--chunk-size', '256KiB', '--quiet', '--json']);
      expect(result.stderr).toBe('');
      const manifest = JSON.parse(readFileSync(path.join(job, 'job.json'), 'utf8'));
      expect(manifest.chunks.length).toBeGreaterThan(5);
      expect(manifest.chunks.every((c: { linesBefore?: number }) => c.linesBefore !== undefined)).toBe(true);
      const listed = await listAll(job, 3);
      for (let n = 1; n <= 3; n++) expect(listed.get(n)).toEqual(reference.get(n));
    }
    {
      // Without token files it stays one chunk: a range would be read by decompressing up to it.
      const job = path.join(dir, 'gzip-no-token-files');
      const result = await runQuern(['count', zipped, '--job', job, '--order', '3', '--workers', '2', '--chunk-size', '256KiB', '--no-token-files', '--quiet', '--json']);
      expect(result.stderr).toBe('');
      const manifest = JSON.parse(readFileSync(path.join(job, 'job.json'), 'utf8'));
      expect(manifest.chunks).toEqual([{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: statSync(zipped).size }]);
      const listed = await listAll(job, 3);
      for (let n = 1; n <= 3; n++) expect(listed.get(n)).toEqual(reference.get(n));
    }
    // A bad line deep in it: named by its line in the file, as when the file was one chunk.
    const text = readFileSync(path.join(corpus, 'shard-1.txt'));
    const at = text.indexOf(0x0a, text.length >> 1) + 1;
    const line = text.subarray(0, at).reduce((sum, byte) => sum + (byte === 0x0a ? 1 : 0), 0) + 1;
    const bad = path.join(dir, 'bad.txt.gz');
    writeFileSync(bad, gzipSync(Buffer.concat([text.subarray(0, at), Buffer.from([0x61, 0xff, 0x0a]), text.subarray(at)])));
    const failed = await runQuern(['count', bad, '--job', path.join(dir, 'bad-job'), '--order', '2', '--workers', '2', '--chunk-size', '256KiB', '--quiet']);
    expect(failed.status).not.toBe(0);
    expect(failed.stderr).toContain(`${bad}:${line} (byte ${at})`);
  }, 120_000);
});
