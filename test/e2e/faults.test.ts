/**
 * I/O faults and damaged files (CONVENTIONS.md: fault injection as in SQLite's I/O-error tests;
 * corrupt-file tests). QUERN_TEST_FAULT = {failAfterOperations: N, mode, errno} makes operation N+1
 * of the StageFs of every thread fail (each thread counts its own), once or from then on;
 * `quern count` must stop with exit status 4 naming the path and the reason, leave no half-written
 * file at a final path, and a re-run without the fault must give the counts of an uninterrupted
 * run. A run file damaged on disk stops the merge with exit status 5, naming the run and the input
 * it came from, and the re-run recounts that chunk.
 *
 * Which operation N+1 is, in the 4-partition job of these tests:
 *   new job with --no-token-files, main thread: 1 mkdir of the job directory; 2–6 job.json (create,
 *   write, sync, rename, sync of the directory); 7–11 vocab.tsv; 12–16 job.json recording the
 *   vocabulary. Then each count worker, counting from 1 in its own thread, writes run files (about 6
 *   operations a file, 16 files a spill) and reaches its operation N+1 long before the main thread
 *   writes again (after a whole chunk).
 *   new job with token files: main thread 1–6 as above, 7 mkdir of tokens/, then (after the
 *   vocabulary pass) 8–12 vocab.tsv and 13–22 the two word tables' maps; meanwhile each vocabulary
 *   worker writes a token file per chunk (create, header, 3 writes per block, rename: 6 operations
 *   for a chunk of one block; 8 chunks), so one of them reaches operation 8..19 first.
 *   job whose count is done, main thread: 1 mkdir; 2–21 job.json recording each partition's merge;
 *   22–26 stats.json; 27–31 job.json recording the merge.
 * If a change of the pipeline moves these, the path check below says which file was hit instead.
 */
import { cpSync, existsSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { JobManifest } from '../../src/job/manifest.ts';
import { seededRandom } from '../support/seeded.ts';
import {
  captureReference, classifyStop, countArgs, expectLikeReference, readJob, readRunFile, removeDir, runAndStopWhen,
  runFilesOnDisk, runToEnd, scratchDir, writeCrashCorpus, type JobReference,
} from '../support/crash.ts';

const SEED = Number(process.env.QUERN_FAULT_SEED ?? 4099);

let dir: string;
let corpus: string;
let reference: JobReference;
let referenceVocabulary: Buffer;
/** A job stopped (SIGKILL) right after its count was recorded as done: nothing merged yet. */
let counted: string;

beforeAll(async () => {
  dir = scratchDir('quern-faults-');
  corpus = writeCrashCorpus(dir);
  const job = path.join(dir, 'reference');
  const result = await runToEnd(countArgs(corpus, job));
  expect(result.stderr).toBe('');
  expect(result.status).toBe(0);
  reference = await captureReference(job);
  referenceVocabulary = readFileSync(path.join(job, 'vocab.tsv'));

  counted = path.join(dir, 'counted');
  const stop = await runAndStopWhen(countArgs(corpus, counted), counted, () => readJob(counted)?.stages.count.status === 'done');
  expect(stop.stopped).toBe(true);
  expect(classifyStop(counted, stop.pid).stage).toBe('merging');
  expect(readJob(counted)!.stages.merge.partitionsDone).toEqual([]);
  expect(existsSync(path.join(counted, 'stats.json'))).toBe(false);
  console.log(`fault tests: seed ${SEED}`);
}, 120_000);

afterAll(() => {
  if (dir) removeDir(dir);
});

/**
 * After a failed or stopped run, nothing at a final path is half-written: job.json parses, vocab.tsv
 * (if there) is the finished vocabulary, stats.json (if there) parses, and every run file under
 * runs/ (every name but temporary *.tmp ones), recorded in job.json or not, reads to its end.
 */
async function expectNoHalfWrittenFile(job: string, what: string): Promise<void> {
  const manifest = readJob(job);
  const vocabulary = path.join(job, 'vocab.tsv');
  if (existsSync(vocabulary)) expect(readFileSync(vocabulary).equals(referenceVocabulary), `${what}: vocab.tsv`).toBe(true);
  const stats = path.join(job, 'stats.json');
  if (existsSync(stats)) expect(() => JSON.parse(readFileSync(stats, 'utf8')), `${what}: stats.json`).not.toThrow();
  const runs = runFilesOnDisk(job).filter((f) => !f.endsWith('.tmp'));
  for (const run of runs) await expect(readRunFile(path.join(job, run)), `${what}: ${run}`).resolves.toBeGreaterThan(0);
  if (manifest) {
    const onDisk = new Set(runs);
    for (const chunk of manifest.stages.count.chunks) {
      for (const run of chunk.runs) expect(onDisk.has(run.file), `${what}: recorded run ${run.file} is on disk`).toBe(true);
    }
  }
}

interface FaultCase {
  label: string;
  /** 'fresh': a new job; 'counted': a copy of the job whose count is done. */
  start: 'fresh' | 'counted';
  mode: 'once' | 'always';
  errno: 'EIO' | 'ENOSPC';
  /** failAfterOperations is drawn (seeded) from [low, high]. */
  operations: [number, number];
  /** The failed path, relative to the job directory. */
  path: RegExp;
  /** Keep token files (the default of quern count); the other cases count without them. */
  tokenFiles?: boolean;
}

const CASES: FaultCase[] = [
  { label: 'job.json of a new job', start: 'fresh', mode: 'once', errno: 'EIO', operations: [1, 5], path: /^job\.json/ },
  { label: 'vocab.tsv', start: 'fresh', mode: 'always', errno: 'ENOSPC', operations: [6, 10], path: /^vocab\.tsv/ },
  { label: 'a token file', start: 'fresh', mode: 'once', errno: 'EIO', operations: [7, 18], path: /^tokens(\/c\d+\.tok(\.\d+\.tmp)?)?$/, tokenFiles: true },
  { label: 'a run file', start: 'fresh', mode: 'once', errno: 'EIO', operations: [16, 80], path: /^runs\/o\d\/p\d{4}(\/c\d{6}-s\d{3}\.run(\.\d+\.tmp)?)?$/ },
  { label: 'a run file', start: 'fresh', mode: 'always', errno: 'ENOSPC', operations: [16, 80], path: /^runs\/o\d\/p\d{4}(\/c\d{6}-s\d{3}\.run(\.\d+\.tmp)?)?$/ },
  { label: 'job.json recording a merged partition', start: 'counted', mode: 'once', errno: 'EIO', operations: [1, 20], path: /^job\.json/ },
  { label: 'stats.json', start: 'counted', mode: 'always', errno: 'ENOSPC', operations: [21, 25], path: /^stats\.json/ },
];

describe('an I/O error stops the count with exit status 4; the re-run without it finishes', () => {
  const random = seededRandom(SEED);
  for (const [index, c] of CASES.entries()) {
    const failAfterOperations = c.operations[0] + Math.floor(random() * (c.operations[1] - c.operations[0] + 1));
    it(`${c.errno} ${c.mode} at ${c.label} (operation ${failAfterOperations + 1})`, async () => {
      const job = path.join(dir, `fault-${index}`);
      if (c.start === 'counted') cpSync(counted, job, { recursive: true });
      const args = [...countArgs(corpus, job), ...(c.tokenFiles ? [] : ['--no-token-files'])];
      const fault = JSON.stringify({ failAfterOperations, mode: c.mode, errno: c.errno });
      const failed = await runToEnd(args, { QUERN_TEST_FAULT: fault });
      expect(failed.status, failed.stderr).toBe(4);
      // The message names the file or directory whose operation failed, and the reason. (The
      // last step of an atomic write syncs the directory: then the job directory is named.)
      const named = /^quern: cannot [a-z ]+? (\/\S+?):? /m.exec(failed.stderr);
      expect(named, failed.stderr).not.toBeNull();
      if (named![1] === job) expect(failed.stderr, 'only a directory sync names the job directory').toContain(`cannot sync directory ${job}:`);
      else expect(path.relative(job, named![1]), failed.stderr).toMatch(c.path);
      expect(failed.stderr).toContain(c.errno === 'ENOSPC' ? 'no space left on device' : 'EIO');
      expect(failed.stderr).not.toContain('internal error');
      expect(existsSync(path.join(job, 'job.lock')), 'lock released').toBe(false);
      await expectNoHalfWrittenFile(job, c.label);

      const rerun = await runToEnd(args);
      expect(rerun.stderr).toBe('');
      expect(rerun.status).toBe(0);
      await expectLikeReference(job, reference, `after a fault at ${c.label}`);
      removeDir(job);
    }, 90_000);
  }
});

describe('a run file damaged on disk', () => {
  it('stops the merge with exit status 5 naming the run and its input; the re-run recounts the chunk', async () => {
    const random = seededRandom(SEED + 1);
    const job = path.join(dir, 'damaged');
    cpSync(counted, job, { recursive: true });
    const before = readJob(job)!;
    // A run of the highest order: merged last in its partition, so whatever part of the merge ran
    // before the stop, this run has not been read yet.
    const runs = before.stages.count.chunks.flatMap((c) => c.runs.map((r) => ({ ...r, chunk: c.chunk })))
      .filter((r) => r.order === before.config.order);
    const run = runs[Math.floor(random() * runs.length)];
    const file = path.join(job, run.file);
    const bytes = readFileSync(file);
    const offset = Math.floor(random() * bytes.length);
    bytes[offset] ^= 1 << Math.floor(random() * 8);
    writeFileSync(file, bytes);
    await expect(readRunFile(file)).rejects.toThrow(/corrupt run file/);

    const args = countArgs(corpus, job);
    const failed = await runToEnd(args);
    const chunk = before.chunks[run.chunk];
    expect(failed.status, failed.stderr).toBe(5);
    expect(failed.stderr).toContain(file);
    expect(failed.stderr).toContain(before.inputs[chunk.fileIndex].path);
    expect(failed.stderr).toMatch(/counted again|recount/);
    expect(existsSync(path.join(job, 'job.lock'))).toBe(false);
    // The chunk is marked to be counted again; its runs and the store are gone.
    const after = readJob(job) as JobManifest;
    expect(after.stages.count.status).not.toBe('done');
    expect(after.stages.count.chunks.map((c) => c.chunk)).not.toContain(run.chunk);
    expect(after.stages.count.chunks.length).toBe(before.stages.count.chunks.length - 1);
    expect(existsSync(file)).toBe(false);
    expect(readdirSync(job)).not.toContain('counts.lmdb');

    const rerun = await runToEnd(args);
    expect(rerun.stderr).toBe('');
    expect(rerun.status).toBe(0);
    await expectLikeReference(job, reference, 'after the damaged run');
    removeDir(job);
  }, 90_000);
});
