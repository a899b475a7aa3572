/**
 * The streaming estimate's probability tables hold 64-bit fingerprints of n-grams instead of their
 * ids (partition-estimate.ts, ProbabilityTable). That stays exact because an insert that meets a
 * second n-gram with the same fingerprint stops the partition's task, which starts again under the
 * next seed. Real collisions are far too rare to meet in a test (about rows² / 2^65), so the test
 * hook narrowFingerprintsForTests makes the first seeds' fingerprints 4 bits wide: every table
 * collides at once.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { afterEach, describe, expect, test } from 'vitest';
import type { EstimateRequest } from '../../src/estimate/estimate.ts';
import type { PlannedRequest } from '../../src/estimate/method-plan.ts';
import { estimatePartition, FingerprintCollision, narrowFingerprintsForTests, type PartitionEstimateResult } from '../../src/estimate/partition-estimate.ts';
import { stageInputs } from '../../src/estimate/stream-stage.ts';
import { stageFs } from '../../src/job/fsio.ts';
import { readManifest } from '../../src/job/manifest.ts';
import { tempDir } from '../support/cli.ts';
import { markovCorpus } from './support.ts';
import { countJob } from './stream-support.ts';

const ORDER = 4;
const corpus = path.join(tempDir(), 'fingerprint.txt');
writeFileSync(corpus, markovCorpus(5, 3_000, 300, 12).map((words) => words.join(' ')).join('\n') + '\n');
const jobDir = path.join(tempDir(), 'job');
const counted = countJob(jobDir, [corpus], ORDER, { partitions: 2 });

afterEach(() => narrowFingerprintsForTests(0, 2));

/** Partition 0 estimated on this thread: its result, its files' bytes, and the rows progress counted. */
async function estimateZero(): Promise<{ result: PartitionEstimateResult; bytes: Map<string, Buffer>; rowsCounted: number }> {
  await counted;
  const job = (await readManifest(jobDir))!;
  const request = { method: 'modified-kneser-ney', fallback: true } as EstimateRequest as PlannedRequest;
  const { settings } = await stageInputs(job, jobDir, request);
  let rowsCounted = 0;
  const result = await estimatePartition(stageFs(), jobDir, 0, settings, (rows) => (rowsCounted += rows));
  const bytes = new Map(result.files.map((f) => [f.file, readFileSync(path.join(jobDir, f.file))]));
  return { result, bytes, rowsCounted };
}

describe('probability tables of fingerprints', () => {
  test('a collision is caught and the partition estimated again under the next seed, to the same bytes', async () => {
    const plain = await estimateZero();
    // Seeds 0 and 1 collide in the table of order 3, after the rows of order 2 were counted as
    // progress; seed 2 is the normal one.
    narrowFingerprintsForTests(2, 3);
    const retried = await estimateZero();
    expect(retried.result).toEqual(plain.result);
    expect([...retried.bytes.keys()]).toEqual([...plain.bytes.keys()]);
    for (const [file, bytes] of plain.bytes) expect(retried.bytes.get(file)!.equals(bytes), file).toBe(true);
    // Progress counted for the failed tries is taken back: each row once, as without collisions.
    expect(retried.rowsCounted).toBe(plain.rowsCounted);
    expect(plain.rowsCounted).toBeGreaterThan(0);
  }, 60_000);

  test('a table that collides under every seed tried stops the task with FingerprintCollision', async () => {
    narrowFingerprintsForTests(1_000);
    const failure = await estimateZero().catch((error: unknown) => error);
    expect(failure).toBeInstanceOf(FingerprintCollision);
    expect((failure as FingerprintCollision).seed).toBe(3); // seeds 0..3 tried
    expect(String(failure)).toMatch(/share a 64-bit table fingerprint/);
  }, 60_000);
});
