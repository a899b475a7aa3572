/**
 * `quern verify` on a job counted from the sample data: it passes on the job as written, and on
 * copies damaged one way each (a run file, a store block, stats.json, vocab.tsv, an input) it fails
 * with exit status 5 and names the damaged file. Unfinished jobs verify what exists.
 */
import { cpSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { beforeAll, describe, expect, test } from 'vitest';
import { encodeBlockValue } from '../../src/count/block-codec.ts';
import type { JobManifest } from '../../src/job/manifest.ts';
import { verifyFailure, verifyJob } from '../../src/job/verify.ts';
import { PartitionStore, partitionStoreDir } from '../../src/merge/store.ts';
import { NO_LOCAL_CONTINUATION_ENV } from '../../src/merge/continuation-stage.ts';
import { REPO, runQuern, tempDir } from '../support/cli.ts';

const LOGBOOK = path.join(REPO, 'sample-data/logbook');
const ORDER = 2;
const PARTITIONS = 2;

let dir: string;
let job: string;
let manifest: JobManifest;
let summary: { tokens: number; sentences: number; distinct: number[]; occurrences: number[] };
let copies = 0;

/** A copy of the counted job to damage. */
function copyJob(): string {
  const copy = path.join(dir, `copy-${copies++}`);
  cpSync(job, copy, { recursive: true });
  return copy;
}

function readJson<T>(file: string): T {
  return JSON.parse(readFileSync(file, 'utf8')) as T;
}

function flipByte(file: string, offset: number): void {
  const bytes = readFileSync(file);
  bytes[offset] ^= 0xff;
  writeFileSync(file, bytes);
}

beforeAll(async () => {
  dir = tempDir('quern-verify-');
  job = path.join(dir, 'job');
  // Through the continuation stage's emit-and-merge path (as for a vocabulary too large for the
  // unigram vectors, suffix-vector.ts), so that the job has continuation runs to check and damage.
  const result = await runQuern(['count', LOGBOOK, '--job', job, '--order', String(ORDER), '--partitions', String(PARTITIONS), '--workers', '2', '--quiet', '--json'], { env: { [NO_LOCAL_CONTINUATION_ENV]: '1' } });
  expect(result.stderr).toBe('');
  expect(result.status).toBe(0);
  summary = JSON.parse(result.stdout);
  manifest = readJson<JobManifest>(path.join(job, 'job.json'));
});

describe('a job as count wrote it', () => {
  test('passes every check, with the numbers of the count beside each verdict', async () => {
    const text = await runQuern(['verify', job]);
    expect(text.stderr).toBe('');
    expect(text.status).toBe(0);
    for (const name of ['manifest', 'vocabulary', 'runs', 'store']) expect(text.stdout).toMatch(new RegExp(`^ok +${name} `, 'm'));
    expect(text.stdout).toMatch(/^skipped +inputs /m);
    expect(text.stdout).toContain('verified: every check passed');

    const json = await runQuern(['verify', job, '--json', '--inputs']);
    expect(json.status).toBe(0);
    const report = JSON.parse(json.stdout);
    expect(report.ok).toBe(true);
    expect(report.pending).toEqual([]);
    expect(report.checks.map((c: { status: string }) => c.status)).toEqual(['ok', 'ok', 'ok', 'ok', 'ok']);
    const store = report.checks.find((c: { name: string }) => c.name === 'store');
    // The numbers come from the store's blocks; the source beside them is count's own summary.
    expect(store.figures.distinct).toEqual(summary.distinct);
    expect(store.figures.total).toEqual(summary.occurrences);
    expect(store.figures.total[0]).toBe(summary.tokens + summary.sentences);
    // Every distinct bigram adds one to the continuation count N1+(• x) of its second word.
    expect(store.figures.continuationTotal).toEqual([summary.distinct[1]]);
    const runs = report.checks.find((c: { name: string }) => c.name === 'runs');
    expect(runs.figures.countSums).toEqual(summary.occurrences);
    expect(runs.figures.continuationCountSums).toEqual([summary.distinct[1]]);
  });

  test('a job whose merge has not finished: verifies the merged partitions and names the pending stage', async () => {
    const copy = copyJob();
    const edited = readJson<JobManifest>(path.join(copy, 'job.json'));
    edited.stages.merge = { status: 'running', partitionsDone: [1] };
    edited.stages.continuation = { status: 'pending', emitted: [], partitionsDone: [] };
    writeFileSync(path.join(copy, 'job.json'), JSON.stringify(edited));
    rmSync(path.join(copy, 'stats.json'));
    const report = await verifyJob(copy);
    expect(report.ok).toBe(true);
    expect(report.pending).toEqual([
      `merge (1 of ${PARTITIONS} partitions merged)`,
      `continuation counts (0 of ${PARTITIONS} partitions emitted, 0 merged)`,
    ]);
    const store = report.checks.find((c) => c.name === 'store')!;
    expect(store.status).toBe('ok');
    expect(store.figures.partitions).toBe(1);
    expect(verifyFailure(report)).toBeUndefined();
  });

  test('a job whose count has not finished: checks the counted chunk\'s runs, skips the store', async () => {
    const copy = copyJob();
    const edited = readJson<JobManifest>(path.join(copy, 'job.json'));
    edited.stages.count = { status: 'running', chunks: [edited.stages.count.chunks[0]] };
    edited.stages.merge = { status: 'pending', partitionsDone: [] };
    edited.stages.continuation = { status: 'pending', emitted: [], partitionsDone: [] };
    writeFileSync(path.join(copy, 'job.json'), JSON.stringify(edited));
    rmSync(path.join(copy, 'counts.lmdb'), { recursive: true });
    const report = await verifyJob(copy);
    expect(report.ok).toBe(true);
    expect(report.pending[0]).toBe(`count (1 of ${manifest.chunks.length} chunks counted)`);
    const runs = report.checks.find((c) => c.name === 'runs')!;
    expect(runs.status).toBe('ok');
    expect(runs.figures.countSums).toEqual(manifest.stages.count.chunks[0].occurrences);
    expect(report.checks.find((c) => c.name === 'store')!.status).toBe('skipped');
  });

  test('the same count, out of order, fails the manifest check (merge done but count pending)', async () => {
    const copy = copyJob();
    const edited = readJson<JobManifest>(path.join(copy, 'job.json'));
    edited.stages.count.status = 'pending';
    edited.stages.count.chunks.push(edited.stages.count.chunks[0]);
    writeFileSync(path.join(copy, 'job.json'), JSON.stringify(edited));
    const report = await verifyJob(copy);
    const check = report.checks.find((c) => c.name === 'manifest')!;
    expect(check.status).toBe('failed');
    expect(check.problems.join('\n')).toContain('merge is done but the count is pending');
    expect(check.problems.join('\n')).toContain(`chunk ${edited.stages.count.chunks[0].chunk} is recorded as counted more than once`);
  });
});

describe.concurrent('a damaged copy fails with exit status 5, naming the file', () => {
  test('a byte flipped in a run file: names the run file and the input its chunk came from', async () => {
    const copy = copyJob();
    const owner = manifest.stages.count.chunks[0];
    const run = owner.runs.filter((r) => r.order === ORDER).sort((a, b) => b.bytes - a.bytes)[0];
    expect(run.bytes).toBeGreaterThan(1000); // the middle byte is inside a block, not the header or trailer
    flipByte(path.join(copy, run.file), Math.floor(run.bytes / 2));
    const result = await runQuern(['verify', copy]);
    expect(result.status).toBe(5);
    const input = manifest.inputs[manifest.chunks[owner.chunk].fileIndex].path;
    expect(result.stderr).toContain(run.file);
    expect(result.stderr).toContain(input);
    expect(result.stdout).toMatch(/^FAILED +runs /m);
    expect(result.stdout).toMatch(/^ok +store /m); // the store does not depend on the runs once merged
  });

  test('a byte flipped inside a block value of the LMDB store: names the partition and the order', async () => {
    const copy = copyJob();
    // The block value as merge wrote it: the first block of order 2 of partition 0, re-encoded from
    // its decoded rows (the coding is deterministic), found by its bytes in the copy's data.mdb.
    const store = PartitionStore.open(path.join(job, partitionStoreDir(0)), 'read');
    let value: Buffer;
    try {
      const block = store.blocks(ORDER).next().value!;
      value = encodeBlockValue(block.keys, block.counts, 0, block.recordCount, ORDER);
    } finally {
      await store.close();
    }
    const dataFile = path.join(copy, partitionStoreDir(0), 'data.mdb');
    const bytes = readFileSync(dataFile);
    let found = 0;
    for (let at = bytes.indexOf(value); at >= 0; at = bytes.indexOf(value, at + 1)) {
      bytes[at + value.length - 1] ^= 0x01; // the last record's count: covered by the block's crc32
      found++;
    }
    expect(found).toBeGreaterThan(0);
    writeFileSync(dataFile, bytes);
    const result = await runQuern(['verify', copy]);
    expect(result.status).toBe(5);
    expect(result.stderr).toContain(`partition 0 (${path.join(copy, partitionStoreDir(0))}), order ${ORDER}`);
    expect(result.stderr).toContain('checksum mismatch');
    expect(result.stdout).toMatch(/^FAILED +store /m);
  });

  test('one n_r changed in stats.json: names stats.json, the order and the count-of-counts', async () => {
    const copy = copyJob();
    const statsFile = path.join(copy, 'stats.json');
    const stats = readJson<{ tallies: Array<{ raw: Array<[number, number]> }> }>(statsFile);
    const [r, n] = stats.tallies[ORDER - 1].raw[0];
    stats.tallies[ORDER - 1].raw[0] = [r, n + 1];
    writeFileSync(statsFile, JSON.stringify(stats));
    const result = await runQuern(['verify', copy]);
    expect(result.status).toBe(5);
    expect(result.stderr).toContain(`${statsFile} order ${ORDER}: count-of-counts n_${r} (field raw) is ${(n + 1).toLocaleString('en-US')} in stats.json, ${n.toLocaleString('en-US')} in the store`);
    expect(result.stderr).toContain(`${statsFile} order ${ORDER}: Σ r·n_r`);
  });

  test('vocab.tsv deleted: names it as missing', async () => {
    const copy = copyJob();
    rmSync(path.join(copy, 'vocab.tsv'));
    const result = await runQuern(['verify', copy]);
    expect(result.status).toBe(5);
    expect(result.stderr).toContain(`${path.join(copy, 'vocab.tsv')} is missing`);
  });

  test('vocab.tsv changed by one count: names it and its checksum', async () => {
    const copy = copyJob();
    const file = path.join(copy, 'vocab.tsv');
    writeFileSync(file, readFileSync(file, 'utf8').replace(/^(1\t[^\t]+\t)(\d+)$/m, (_, head: string, count: string) => head + String(Number(count) + 1)));
    const result = await runQuern(['verify', copy]);
    expect(result.status).toBe(5);
    expect(result.stderr).toContain(`${file}: sha256`);
    expect(result.stderr).toContain('does not match');
  });
});

describe('continuation counts', () => {
  test('a job of order 3, whose order-1 and order-2 continuation counts come from the partitions themselves, passes', async () => {
    // merge/suffix-vector.ts and merge/local-continuation.ts: such orders emit no runs, so their
    // runs cannot sum to the distinct n-grams above them; the store check still compares Σ N1+ with them.
    const order3 = path.join(dir, 'order3');
    const counted = await runQuern(['count', LOGBOOK, '--job', order3, '--order', '3', '--partitions', String(PARTITIONS), '--workers', '2', '--quiet']);
    expect(counted.status).toBe(0);
    expect(readJson<JobManifest>(path.join(order3, 'job.json')).stages.continuation.local).toEqual(new Array(PARTITIONS).fill([1, 2]));
    const result = await runQuern(['verify', order3]);
    expect(result.stderr).toBe('');
    expect(result.stdout).toContain('orders 1, 2 not compared: counted inside the partitions');
    expect(result.stdout).toMatch(/^ok +store .*Σ N1\+ at order m = distinct n-grams of order m\+1/m);
    expect(result.stdout).toContain('verified: every check passed');
  });

  test('a byte flipped in a continuation run: names the run and the partition it was emitted from', async () => {
    const copy = copyJob();
    const emitted = manifest.stages.continuation.emitted[0];
    const run = [...emitted.runs].sort((a, b) => b.bytes - a.bytes)[0];
    expect(run.bytes).toBeGreaterThan(1000);
    flipByte(path.join(copy, run.file), Math.floor(run.bytes / 2));
    const report = await verifyJob(copy);
    const runs = report.checks.find((c) => c.name === 'runs')!;
    expect(runs.status).toBe('failed');
    expect(runs.problems).toHaveLength(1);
    expect(runs.problems[0]).toContain(path.join(copy, run.file));
    expect(runs.problems[0]).toContain(`emitted from the order 2..${ORDER} n-grams of partition ${emitted.partition}`);
    expect(verifyFailure(report)!.code).toBe('corrupt');
  });

  test('one continuation n_r changed in stats.json: names the continuation order and field', async () => {
    const copy = copyJob();
    const statsFile = path.join(copy, 'stats.json');
    const stats = readJson<{ continuation: Array<{ raw: Array<[number, number]> }> }>(statsFile);
    const [r, n] = stats.continuation[0].raw[1];
    stats.continuation[0].raw[1] = [r, n - 1];
    writeFileSync(statsFile, JSON.stringify(stats));
    const report = await verifyJob(copy);
    const store = report.checks.find((c) => c.name === 'store')!;
    expect(store.status).toBe('failed');
    expect(store.problems).toEqual([`${statsFile} continuation order 1: count-of-counts n_${r} (field raw) is ${(n - 1).toLocaleString('en-US')} in stats.json, ${n.toLocaleString('en-US')} in the store`]);
  });
});

describe('inputs and the manifest itself', () => {
  test('--inputs: an input that differs from its record fails the inputs check', async () => {
    const copy = copyJob();
    const changed = path.join(dir, 'changed-input.txt');
    writeFileSync(changed, 'a different corpus\n');
    const edited = readJson<JobManifest>(path.join(copy, 'job.json'));
    edited.inputs[0].path = changed;
    writeFileSync(path.join(copy, 'job.json'), JSON.stringify(edited));
    const unchecked = await verifyJob(copy);
    expect(unchecked.ok).toBe(true);
    const report = await verifyJob(copy, { inputs: true });
    const check = report.checks.find((c) => c.name === 'inputs')!;
    expect(check.status).toBe('failed');
    expect(check.problems).toEqual([`input changed size: ${changed} (${manifest.inputs[0].bytes} → 19 bytes)`]);
    const error = verifyFailure(report)!;
    expect(error.code).toBe('corrupt');
    expect(error.message).toContain(changed);
  });

  test('job.json that is not JSON: the manifest check fails and the others are skipped', async () => {
    const copy = copyJob();
    writeFileSync(path.join(copy, 'job.json'), '{"format": "quern-job", ');
    const report = await verifyJob(copy);
    expect(report.ok).toBe(false);
    expect(report.checks.map((c) => c.status)).toEqual(['failed', 'skipped', 'skipped', 'skipped', 'skipped']);
    expect(verifyFailure(report)!.message).toContain(path.join(copy, 'job.json'));
  });
});
