/**
 * The streaming estimate as a job stage: an interrupted estimate (I/O fault, SIGKILL) resumes
 * without redoing finished partitions and gives the same model; other options make the results
 * stale; a partition that does not fit --memory is refused with the partitions that would fit; a
 * damaged result file is reported by name. Jelinek-Mercer on the command line: weights fitted on the
 * store and printed, the model the in-memory path gives; bad held-out input refused.
 */
import { spawn } from 'node:child_process';
import { cpSync, existsSync, mkdirSync, readdirSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { open } from 'lmdb';
import { beforeAll, describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { estimate } from '../../src/estimate/estimate.ts';
import { loadCountTables } from '../../src/estimate/from-store.ts';
import { liveRowThreadGates, openJobModelSource, quiesceRowThreads, threadedPassesStarted } from '../../src/estimate/job-model-source.ts';
import { materialiseModel } from '../../src/estimate/model-source.ts';
import { estimateJobStreaming } from '../../src/estimate/stream-stage.ts';
import { readManifest, type EstimateStage } from '../../src/job/manifest.ts';
import { FAULT_ENV, nodeFs } from '../../src/job/fsio.ts';
import { packModel, packModelSource } from '../../src/pack/writer.ts';
import { KEY_SPACE, partitionStoreDir } from '../../src/merge/store.ts';
import { REPO, runQuern, tempDir } from '../support/cli.ts';
import { countJob, expectSameModel } from './stream-support.ts';
import { makeTokenizer } from '../../src/corpus/tokenize.ts';
import type { CountTables } from '../../src/estimate/counts.ts';
import type { InterpolationWeights } from '../../src/estimate/model.ts';

let counted = '';
beforeAll(async () => {
  counted = path.join(tempDir(), 'job');
  await countJob(counted, [path.join(REPO, 'sample-data/logbook')], 4, { partitions: 16 });
}, 60_000);

/** A fresh copy of the counted job. */
function copyJob(): string {
  const job = path.join(tempDir(), 'job');
  cpSync(counted, job, { recursive: true });
  return job;
}

async function stageOf(job: string): Promise<EstimateStage | undefined> {
  return (await readManifest(job))!.stages.estimate;
}

/** Expects the job's finished estimate to be the in-memory modified Kneser-Ney model. */
async function expectInMemoryModel(job: string): Promise<void> {
  const streamed = await materialiseModel(await openJobModelSource(job));
  expectSameModel(streamed, estimate(await loadCountTables(job, 1 << 30), { fallback: true }));
}

/** mtime of every recorded result file of the partitions done. */
function resultTimes(job: string, stage: EstimateStage): Map<string, number> {
  return new Map(stage.partitionsDone.flatMap((p) => p.files.map((f) => [f.file, statSync(path.join(job, f.file)).mtimeMs] as [string, number])));
}

const ESTIMATE_ARGS = ['--fallback', '--quiet', '--workers', '1', '--memory', '256MiB'];

describe('resuming an interrupted estimate', () => {
  test.each([40, 120, 400])('an I/O fault after %i operations per thread stops it; the re-run finishes the remaining partitions only', async (operations) => {
    const job = copyJob();
    const out = path.join(job, 'model.qm');
    const failed = await runQuern(['estimate', job, '--out', out, ...ESTIMATE_ARGS], { env: { [FAULT_ENV]: JSON.stringify({ failAfterOperations: operations, mode: 'always', errno: 'EIO' }) } });
    expect(failed.status).not.toBe(0);
    expect(failed.stderr).toMatch(/EIO/);
    const before = await stageOf(job);
    expect(before?.status).not.toBe('done');
    const times = before === undefined ? new Map() : resultTimes(job, before);
    const resumed = await runQuern(['estimate', job, '--out', out, ...ESTIMATE_ARGS]);
    expect(resumed.stderr).toBe('');
    expect(resumed.status).toBe(0);
    const after = (await stageOf(job))!;
    expect(after.status).toBe('done');
    expect(after.partitionsDone.map((p) => p.partition)).toEqual(Array.from({ length: 16 }, (_, p) => p));
    // Partitions finished before the fault were not estimated again: same files, untouched.
    for (const [file, mtime] of times) expect(statSync(path.join(job, file)).mtimeMs).toBe(mtime);
    await expectInMemoryModel(job);
  }, 60_000);

  test('SIGKILL in the middle; the re-run gives the same model', async () => {
    const job = copyJob();
    const out = path.join(job, 'model.qm');
    const child = spawn(process.execPath, [path.join(REPO, 'bin/quern.js'), 'estimate', job, '--out', out, ...ESTIMATE_ARGS], { stdio: 'ignore' });
    const exited = new Promise<void>((resolve) => child.on('exit', () => resolve()));
    let partitionsSeen = 0;
    for (let i = 0; i < 3000 && partitionsSeen < 2; i++) {
      await new Promise((resolve) => setTimeout(resolve, 5));
      try {
        const stage = JSON.parse(readFileSync(path.join(job, 'job.json'), 'utf8')).stages.estimate as EstimateStage | undefined;
        partitionsSeen = stage?.partitionsDone.length ?? 0;
      } catch {
        // job.json is replaced by rename: a read never sees half of it, but may race the first write.
      }
    }
    child.kill('SIGKILL');
    await exited;
    const before = (await stageOf(job))!;
    expect(before.status).not.toBe('done');
    expect(before.partitionsDone.length).toBeGreaterThanOrEqual(2);
    const times = resultTimes(job, before);
    const resumed = await runQuern(['estimate', job, '--out', out, ...ESTIMATE_ARGS]);
    expect(resumed.status).toBe(0);
    for (const [file, mtime] of times) expect(statSync(path.join(job, file)).mtimeMs).toBe(mtime);
    await expectInMemoryModel(job);
  }, 60_000);
});

describe('the estimate stage', () => {
  test('another method makes the earlier results stale: they are removed, and the model is the new method\'s', async () => {
    const job = copyJob();
    await estimateJobStreaming({ jobDir: job, request: { method: 'witten-bell' }, memoryBytes: 256 << 20, workers: 2 });
    const first = (await stageOf(job))!;
    const { source } = await estimateJobStreaming({ jobDir: job, request: { method: 'katz', fallback: true }, memoryBytes: 256 << 20, workers: 2 });
    const second = (await stageOf(job))!;
    expect(second.key).not.toBe(first.key);
    expect(JSON.parse(second.key).method).toBe('katz');
    expectSameModel(await materialiseModel(source), estimate(await loadCountTables(job, 1 << 30), { method: 'katz', fallback: true }));
  }, 60_000);

  test('read for its ids alone (idsOnly), an order gives the ids of a full read and no back-off weights; packed from the job (on one thread or with threads), the model has the bytes of its materialised copy packed', async () => {
    const job = copyJob();
    await estimateJobStreaming({ jobDir: job, request: { method: 'modified-kneser-ney', fallback: true }, memoryBytes: 256 << 20, workers: 2 });
    const source = await openJobModelSource(job);
    for (let order = 2; order <= source.rowCounts.length; order++) {
      const full: number[] = [];
      const alone: number[] = [];
      for await (const batch of source.rows(order)) full.push(...batch.ids);
      for await (const batch of source.rows(order, { idsOnly: true })) {
        expect(batch.log10BackOff.length).toBe(0);
        alone.push(...batch.ids);
      }
      expect(alone.length).toBe(source.rowCounts[order - 1] * order);
      expect(alone).toEqual(full);
    }
    const fromJob = path.join(job, 'from-job.qm');
    const fromCopy = path.join(job, 'from-copy.qm');
    await packModel(await materialiseModel(await openJobModelSource(job)), { fingerprint: 'f', quantBits: 8 }, nodeFs, fromCopy);
    // On this thread, and with each pass over an order read in a thread of its own.
    for (const threads of [false, true]) {
      const started = threadedPassesStarted();
      await packModelSource(await openJobModelSource(job, { threads, threadRowsMin: 0 }), { fingerprint: 'f', quantBits: 8 }, nodeFs, fromJob);
      expect(readFileSync(fromJob).equals(readFileSync(fromCopy))).toBe(true);
      // Orders 2..4 each read twice (beside the order below, then for their own sections), order 1 on this thread: 6 passes.
      expect(threadedPassesStarted() - started).toBe(threads ? 6 : 0);
    }
  }, 60_000);

  test('a stop signal during a pack closes the gate of every row thread running (quiesceRowThreads) before the process exits', async () => {
    const job = copyJob();
    await estimateJobStreaming({ jobDir: job, request: { method: 'witten-bell' }, memoryBytes: 256 << 20, workers: 2 });
    const source = await openJobModelSource(job, { threads: true, threadRowsMin: 0 });
    const rows = source.rows(3)[Symbol.asyncIterator]();
    let batch = await rows.next(); // the thread has loaded its modules and sent a batch
    let read = 0;
    const gates = liveRowThreadGates();
    expect(gates.length).toBe(1);
    // What pack-signals.ts runs before process.exit: every running row thread's gate closed, and no
    // section it must not be ended in running (gate words: [closed, sections running]). A thread
    // still loading would be waited for (stop-gate tests); this one is past its load.
    quiesceRowThreads();
    expect(gates[0].closed).toBe(true);
    expect(Atomics.load(gates[0].words, 1)).toBe(0);
    // The pass is no such section: it reads on to its end, and its thread's gate is then forgotten.
    for (; !batch.done; batch = await rows.next()) read += batch.value.rows;
    expect(read).toBe(source.rowCounts[2]);
    expect(liveRowThreadGates().length).toBe(0);
  }, 60_000);

  test('stale results are moved aside and removed while the partitions are estimated; leftovers of an interrupted removal go too', async () => {
    const job = copyJob();
    await estimateJobStreaming({ jobDir: job, request: { method: 'witten-bell' }, memoryBytes: 256 << 20, workers: 2 });
    const staleFile = path.join(job, 'estimate', 'p0003', 'o2.prob');
    expect(statSync(staleFile).size).toBeGreaterThan(0);
    // What a run killed while removing a folder it had moved aside leaves behind.
    const leftover = path.join(job, 'estimate.stale-1-2', 'p0001');
    mkdirSync(leftover, { recursive: true });
    writeFileSync(path.join(leftover, 'o2.prob'), 'stale');
    await estimateJobStreaming({ jobDir: job, request: { fallback: true }, memoryBytes: 256 << 20, workers: 2, restart: true });
    expect(readdirSync(job).filter((name) => name.startsWith('estimate'))).toEqual(['estimate']);
    expect(JSON.parse((await stageOf(job))!.key).method).toBe('modified-kneser-ney');
    await expectInMemoryModel(job);
  }, 60_000);

  test('a partition that does not fit --memory is refused, naming the partitions that would fit', async () => {
    const job = copyJob();
    const error = await estimateJobStreaming({ jobDir: job, request: { fallback: true }, memoryBytes: 200_000, workers: 2 }).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect((error as QuernError).code).toBe('limit');
    expect((error as QuernError).message).toMatch(/partition \d+ of .* needs about \d+ bytes to estimate, more than --memory 200000.*--partitions (\d+)/);
    const suggested = Number(/--partitions (\d+)/.exec((error as QuernError).message)![1]);
    expect(suggested).toBeGreaterThan(16);
    const cli = await runQuern(['estimate', job, '--memory', '200000', '--quiet', '--fallback']);
    expect(cli.status).not.toBe(0);
    expect(cli.stderr).toMatch(/--partitions/);
  }, 60_000);

  test('a damaged result file is reported with its name, and --restart estimates again', async () => {
    const job = copyJob();
    await estimateJobStreaming({ jobDir: job, request: { fallback: true }, memoryBytes: 256 << 20, workers: 2 });
    const stage = (await stageOf(job))!;
    const record = stage.partitionsDone[3].files.find((f) => f.kind === 'probabilities' && f.order === 3)!;
    const file = path.join(job, record.file);
    const bytes = readFileSync(file);
    bytes[200] ^= 0x40;
    writeFileSync(file, bytes);
    // Read on this thread, and in threads of its own (as quern estimate packs): the same error.
    for (const threads of [false, true]) {
      const error = await materialiseModel(await openJobModelSource(job, { threads, threadRowsMin: 0 })).catch((e: unknown) => e);
      expect(error).toBeInstanceOf(QuernError);
      expect((error as QuernError).code).toBe('corrupt');
      expect((error as QuernError).message).toContain(file);
    }
    const restarted = await estimateJobStreaming({ jobDir: job, request: { fallback: true }, memoryBytes: 256 << 20, workers: 2, restart: true });
    expect(restarted.partitionsEstimated).toBe(16);
    await expectInMemoryModel(job);
  }, 60_000);
});

describe('reading the count store', () => {
  // Without cutoffs, Kneser-Ney's lower orders are read from the continuation counts, and the raw
  // counts only for the n-grams that begin with <s> (partition-estimate.ts, readContinuationOnly):
  // a store whose continuation counts lost rows must not give a model without them.
  test('continuation counts that lost a block: the partition is reported as corrupt, by the rows its merge recorded', async () => {
    const job = copyJob();
    const partition = 5;
    const order = 3;
    const env = open<Buffer, Buffer>({ path: path.join(job, partitionStoreDir(partition)), keyEncoding: 'binary', encoding: 'binary', compression: false });
    const space = KEY_SPACE.continuation + order;
    let removed = 0;
    for (const { key } of env.getRange({ start: Buffer.from([space]), end: Buffer.from([space + 1]), limit: 1 })) {
      env.removeSync(Buffer.from(key));
      removed++;
    }
    await env.close();
    expect(removed).toBe(1);
    const error = await estimateJobStreaming({ jobDir: job, request: { fallback: true }, memoryBytes: 256 << 20, workers: 1 }).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect((error as QuernError).code).toBe('corrupt');
    expect((error as QuernError).message).toMatch(new RegExp(`p000${partition}: order ${order} holds \\d+ n-grams .* its merge recorded \\d+`));
  }, 60_000);
});

describe('Jelinek-Mercer on the command line', () => {
  const heldOutFile = path.join(REPO, 'sample-data/heldout/harbour-heldout.txt');

  /** The held-out file as the job's ids (its lines lower-cased and split at spaces, as countJob counts). */
  function heldOutIds(counts: CountTables): Uint32Array[] {
    const ids = new Map(counts.vocabulary.words.map((w, id) => [w, id]));
    const tokenize = makeTokenizer({ lowercase: true, unicode: 'none', split: 'space' });
    const tokens: string[] = [];
    return readFileSync(heldOutFile, 'utf8').split('\n').filter((line) => line.trim() !== '')
      .map((line) => Uint32Array.from(tokens.slice(0, tokenize(line, tokens)), (w) => ids.get(w) ?? counts.vocabulary.unkId));
  }

  test('quern estimate --method jelinek-mercer fits the weights on the store, prints them, streams the partitions, and gives the in-memory model', async () => {
    const job = copyJob();
    const out = path.join(job, 'jm.qm');
    const args = ['estimate', job, '--method', 'jelinek-mercer', '--heldout', heldOutFile, '--bucketed', '--out', out, '--quiet', '--workers', '2', '--memory', '256MiB'];
    const run = await runQuern(args);
    expect(run.stderr).toBe(''); // --quiet: no notices
    expect(run.status).toBe(0);
    const stage = (await stageOf(job))!;
    expect(stage.status).toBe('done');
    expect(stage.partitionsDone).toHaveLength(16);
    const counts = await loadCountTables(job, 1 << 30);
    const inMemory = estimate(counts, { method: 'jelinek-mercer', heldOut: heldOutIds(counts), bucketed: true });
    expectSameModel(await materialiseModel(await openJobModelSource(job)), inMemory);
    // The weights are printed (without --quiet) and stored in the model file.
    const again = await runQuern(args.filter((a) => a !== '--quiet'));
    expect(again.status).toBe(0);
    expect(again.stderr).toMatch(/fitting the Jelinek-Mercer weights on \d+ held-out sentences/);
    expect(again.stderr).toMatch(/order 2, contexts seen 1 time: λ = [01]\.\d{6}/);
    expect(again.stderr).toMatch(/order 3, contexts seen 2–3 times: λ = [01]\.\d{6}/);
    // Same held-out text, same weights, same key: the finished partitions are kept.
    expect((await stageOf(job))!.key).toBe(stage.key);
    const info = await runQuern(['info', out]);
    expect(info.status).toBe(0);
    expect(info.stdout).toMatch(/method\s+jelinek-mercer/);
    const lambda = (inMemory.parameters as { weights: InterpolationWeights }).weights.orders[1].buckets[0].weight;
    expect(info.stdout).toContain(`order 2: λ = ${lambda.toFixed(4)}`);
  }, 60_000);

  test('bad held-out input: no --heldout, a missing file, invalid UTF-8 — an error naming the cause, and no model file', async () => {
    const job = copyJob();
    const out = path.join(job, 'jm.qm');
    const base = ['estimate', job, '--method', 'jelinek-mercer', '--out', out, '--quiet'];
    const none = await runQuern(base);
    expect(none.status).not.toBe(0);
    expect(none.stderr).toMatch(/--heldout/);
    const missing = await runQuern([...base, '--heldout', path.join(job, 'nowhere.txt')]);
    expect(missing.status).not.toBe(0);
    expect(missing.stderr).toMatch(/nowhere\.txt/);
    const bad = path.join(job, 'bad-heldout.txt');
    writeFileSync(bad, Buffer.concat([Buffer.from('the ferry came\nthe gulls '), Buffer.from([0xff, 0xfe]), Buffer.from(' left\n')]));
    const invalid = await runQuern([...base, '--heldout', bad]);
    expect(invalid.status).not.toBe(0);
    expect(invalid.stderr).toMatch(/bad-heldout\.txt:2 \(byte \d+\): invalid UTF-8/); // file:line
    expect(existsSync(out)).toBe(false);
  }, 60_000);
});
