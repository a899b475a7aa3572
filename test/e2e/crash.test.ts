/**
 * Crash tests (DESIGN.md, "Resumable"): `quern count` runs in a child process and is killed with
 * SIGKILL at seeded random moments and at moments aimed at each stage; re-running the same command
 * must finish with exactly the counts of an uninterrupted run (same store digests, same stats.json,
 * same listing). Also: SIGINT and SIGTERM stop cleanly, and the job lock keeps a second process off
 * a running job.
 *
 * Random moments: drawn uniformly over the wall time of the uninterrupted run, which notes when
 * job.json records each unit of work. A moment is "so many ms after unit k was recorded", so a
 * re-run, which first spends time starting up, is killed at the same place of the work (timed from
 * when it reaches unit k, or takes the lock if it starts there). Several kills hit one job in a row.
 *
 * Set QUERN_CRASH_SEED to try other kill moments; the seed in use is printed.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, statSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { seededRandom } from '../support/seeded.ts';
import {
  captureReference, classifyStop, countArgs, drawKillPoints, expectLikeReference, lockOwner, readJob, recordedRunFiles,
  removeDir, runAndKillAt, runAndStopWhen, runFilesOnDisk, runToEnd, runWithTimeline, scratchDir, sha256, startQuern,
  stopNow, StopTally, writeCrashCorpus, type JobReference, type StopStage, type Timeline,
} from '../support/crash.ts';

const SEED = Number(process.env.QUERN_CRASH_SEED ?? 7031);
/** SIGKILLs at moments drawn uniformly over the uninterrupted run's wall time. */
const RANDOM_KILLS = 20;
/** Random kills on one job before its final re-run (fewer, longer chains save fresh starts). */
const KILLS_PER_CHAIN = 10;
/** The order whose `quern ngrams` listing is compared. */
const LISTED_ORDER = '3';

let dir: string;
let corpus: string;
let reference: JobReference;
let referenceListing: string;
/** The uninterrupted run: when it recorded each unit of work. */
let timeline: Timeline;
/** Chunks that the uninterrupted run spilled in the middle of (budget full). */
let spillingChunks: Set<number>;
const randomKills = new StopTally();
const aimedKills = new StopTally();

beforeAll(async () => {
  dir = scratchDir('quern-crash-');
  corpus = writeCrashCorpus(dir);
  const job = path.join(dir, 'reference');
  timeline = await runWithTimeline(countArgs(corpus, job), job);
  expect(timeline.result.stderr).toBe('');
  expect(timeline.result.status).toBe(0);
  reference = await captureReference(job);
  const listing = await runToEnd(['ngrams', job, '--order', LISTED_ORDER]);
  expect(listing.status).toBe(0);
  referenceListing = listing.stdout;
  const manifest = readJob(job)!;
  spillingChunks = new Set(manifest.stages.count.chunks.filter((c) => c.spills > 0).map((c) => c.chunk));
  // The corpus and options must give what the kills aim at: several chunks, spills inside chunks.
  expect(manifest.chunks.length, 'chunks').toBeGreaterThanOrEqual(6);
  expect(spillingChunks.size, 'chunks with a spill inside (retune writeCrashCorpus and countArgs if 0)').toBeGreaterThanOrEqual(2);
  const { vocab, count, merge, continuation } = manifest.stages;
  console.log(`crash tests: seed ${SEED}; uninterrupted run ${timeline.wallMs} ms wall, ${timeline.steps.length - 1} units of work recorded at ${timeline.steps.join(' ')} ms (vocabulary ${vocab.elapsedMs} ms, count ${count.elapsedMs} ms, merge ${merge.elapsedMs} ms, continuation ${continuation.elapsedMs} ms), ${manifest.chunks.length} chunks, ${spillingChunks.size} with a spill inside`);
}, 120_000);

afterAll(() => {
  const all = new StopTally();
  all.points.push(...randomKills.points, ...aimedKills.points);
  console.log([
    randomKills.format('SIGKILL at random moments'), randomKills.formatDetails(),
    aimedKills.format('SIGKILL aimed at stages'), aimedKills.formatDetails(),
    all.format('all SIGKILLs'),
  ].join('\n'));
  if (dir) removeDir(dir);
});

/**
 * Re-runs the job to the end (unless `finished`: the last run already did) and checks it against
 * the uninterrupted run: exit 0, same digests, stats.json and listing, nothing left behind.
 */
async function checkFinished(job: string, what: string, finished = false): Promise<void> {
  if (!finished) {
    const result = await runToEnd(countArgs(corpus, job));
    expect(result.stderr, what).toBe('');
    expect(result.status, what).toBe(0);
  }
  await expectLikeReference(job, reference, what);
  const listing = await runToEnd(['ngrams', job, '--order', LISTED_ORDER]);
  expect(listing.status, what).toBe(0);
  expect(sha256(listing.stdout), `${what}: listing of order ${LISTED_ORDER}`).toBe(sha256(referenceListing));
  removeDir(job);
}

describe('SIGKILL, then re-run the same command', () => {
  it(`at ${RANDOM_KILLS} seeded random moments, ${KILLS_PER_CHAIN} kills per job`, async () => {
    const random = seededRandom(SEED);
    let kills = 0;
    for (let chain = 0; kills < RANDOM_KILLS; chain++) {
      expect(chain, 'too many jobs finished before their kills').toBeLessThan(2 * RANDOM_KILLS / KILLS_PER_CHAIN);
      const job = path.join(dir, `random-${chain}`);
      let finished = false;
      for (const [k, point] of drawKillPoints(random, Math.min(KILLS_PER_CHAIN, RANDOM_KILLS - kills), timeline).entries()) {
        const outcome = await runAndKillAt(countArgs(corpus, job), job, point);
        if (!outcome.stopped) {
          // The re-run finished before the kill: that is this job's final re-run.
          expect(outcome.result.stderr).toBe('');
          expect(outcome.result.status).toBe(0);
          finished = true;
          break;
        }
        expect(outcome.result.signal).toBe('SIGKILL');
        kills++;
        randomKills.add(`job ${chain} kill ${k + 1} (${point.pointMs} ms = unit ${point.progress} + ${point.offsetMs} ms)`, classifyStop(job, outcome.pid), outcome.atMs);
      }
      await checkFinished(job, `random-${chain}`, finished);
    }
    expect(randomKills.points.length).toBe(RANDOM_KILLS);
  }, 480_000);

  it('aimed at every stage, one job killed again and again', async () => {
    const random = seededRandom(SEED + 1);
    const job = path.join(dir, 'aimed');
    const args = countArgs(corpus, job);
    const state = () => readJob(job);
    const stages = () => state()?.stages;
    /** Run files this run wrote (since `sinceMs`) that job.json does not record yet. */
    const newUnrecordedRuns = (sinceMs: number): string[] => {
      const manifest = state();
      if (!manifest) return [];
      const recorded = new Set(recordedRunFiles(manifest));
      return runFilesOnDisk(job, sinceMs).filter((f) => !recorded.has(f));
    };
    const storeWritten = (sinceMs: number): boolean => [0, 1, 2, 3].some((p) =>
      (statSync(path.join(job, 'counts.lmdb', `p000${p}`, 'data.mdb'), { throwIfNoEntry: false })?.mtimeMs ?? 0) >= sinceMs);
    // Each aim's condition must be brought about by the run being killed: it compares with the
    // state before that run (`before`) or looks only at files written since it started.
    let before = { chunks: 0, partitions: 0, emitted: 0, continued: 0 };
    const aims: Array<{ label: string; ready: (sinceMs: number) => boolean; afterMs?: number; expected: StopStage[] }> = [
      {
        label: 'vocabulary pass running',
        ready: () => stages()?.vocab.status === 'pending',
        afterMs: 50 + Math.floor(random() * 250),
        expected: ['vocabulary'],
      },
      { label: 'vocabulary just recorded', ready: () => stages()?.vocab.status === 'done', expected: ['counting', 'spilling'] },
      { label: 'first chunk recorded', ready: () => (stages()?.count.chunks.length ?? 0) > before.chunks, expected: ['counting', 'spilling'] },
      {
        // A chunk that spilled inside in the uninterrupted run: its first spill is on disk, unrecorded.
        label: 'spill of an unfinished chunk',
        ready: (since) => newUnrecordedRuns(since).some((f) => {
          const m = /c(\d+)-s000\.run$/.exec(f);
          return m !== null && spillingChunks.has(Number(m[1]));
        }),
        expected: ['spilling'],
      },
      {
        // A second spill of one chunk: the first was forced by the full budget, inside the chunk.
        label: 'second spill of a chunk',
        ready: (since) => newUnrecordedRuns(since).some((f) => /c\d+-s001\.run/.test(f)),
        expected: ['spilling'],
      },
      {
        label: 'another chunk recorded',
        ready: () => (stages()?.count.chunks.length ?? 0) > before.chunks || stages()?.count.status === 'done',
        expected: ['counting', 'spilling', 'merging'],
      },
      { label: 'count just recorded as done', ready: () => stages()?.count.status === 'done', expected: ['merging'] },
      { label: 'merge writing the store', ready: storeWritten, afterMs: Math.floor(random() * 100), expected: ['merging'] },
      {
        label: 'another partition merged',
        ready: () => (stages()?.merge.partitionsDone.length ?? 0) > before.partitions,
        expected: ['merging', 'continuation'],
      },
      {
        label: 'continuation: a partition emitted',
        ready: () => (stages()?.continuation.emitted.length ?? 0) > before.emitted,
        expected: ['continuation'],
      },
      {
        label: 'continuation: a partition merged',
        ready: () => (stages()?.continuation.partitionsDone.length ?? 0) > before.continued,
        expected: ['continuation', 'finished'],
      },
    ];
    for (const aim of aims) {
      const s = stages();
      before = {
        chunks: s?.count.chunks.length ?? 0,
        partitions: s?.merge.partitionsDone.length ?? 0,
        emitted: s?.continuation.emitted.length ?? 0,
        continued: s?.continuation.partitionsDone.length ?? 0,
      };
      const outcome = await runAndStopWhen(args, job, aim.ready, { afterMs: aim.afterMs });
      expect(outcome.stopped, `${aim.label}: the run ended before the kill (${outcome.result.stderr})`).toBe(true);
      expect(outcome.result.signal).toBe('SIGKILL');
      const point = classifyStop(job, outcome.pid);
      aimedKills.add(aim.label, point, outcome.atMs);
      expect(aim.expected, `${aim.label}: hit ${point.detail}`).toContain(point.stage);
    }
    await checkFinished(job, 'aimed');
  }, 240_000);

  it('kills hit every stage: vocabulary, counting, spilling, merging, continuation counts', () => {
    const all = [...randomKills.points, ...aimedKills.points];
    expect(all.length).toBeGreaterThanOrEqual(30);
    for (const stage of ['vocabulary', 'counting', 'spilling', 'merging', 'continuation'] as StopStage[]) {
      expect(all.filter((p) => p.stage === stage).length, stage).toBeGreaterThan(0);
    }
  });
});

describe('SIGINT and SIGTERM', () => {
  it('stop cleanly with 130 / 143, say how to resume, release the lock; the re-run finishes', async () => {
    const job = path.join(dir, 'signals');
    const args = countArgs(corpus, job);
    const lock = path.join(job, 'job.lock');
    const stops: Array<{ signal: NodeJS.Signals; status: number; ready: () => boolean; stage: StopStage[] }> = [
      { signal: 'SIGINT', status: 130, ready: () => (readJob(job)?.stages.count.chunks.length ?? 0) >= 1, stage: ['counting', 'spilling'] },
      { signal: 'SIGTERM', status: 143, ready: () => (readJob(job)?.stages.merge.partitionsDone.length ?? 0) >= 1, stage: ['merging', 'continuation'] },
    ];
    for (const stop of stops) {
      const outcome = await runAndStopWhen(args, job, stop.ready, { signal: stop.signal });
      expect(outcome.stopped, `${stop.signal}: the run ended first, status ${outcome.result.status}: ${outcome.result.stderr}`).toBe(true);
      const { status, signal, stderr } = outcome.result;
      expect(signal).toBeNull();
      expect(status).toBe(stop.status);
      expect(stderr).toContain(`stopped by ${stop.signal}`);
      expect(stderr).toContain(job);
      expect(stderr).toContain('re-run the same command');
      expect(existsSync(lock)).toBe(false);
      expect(stop.stage).toContain(classifyStop(job).stage);
    }
    await checkFinished(job, 'signals');
  }, 90_000);
});

describe('the job lock', () => {
  it('keeps a second count off a running job, naming the process that holds it; a stale lock is taken over', async () => {
    const job = path.join(dir, 'locked');
    const args = countArgs(corpus, job);
    const lock = path.join(job, 'job.lock');
    const first = startQuern(args);
    while (!first.exited() && !(lockOwner(job) === first.pid && readJob(job) !== undefined)) await new Promise((r) => setTimeout(r, 5));
    expect(first.exited(), 'the first count ended before the second started').toBe(false);
    const second = await runToEnd(args);
    expect(second.status).toBe(2);
    expect(second.stderr).toContain(`in use by process ${first.pid}`);
    expect(second.stderr).toContain(lock);
    // The refused process left the lock to its owner, which is still at work.
    expect(first.exited()).toBe(false);
    expect(lockOwner(job)).toBe(first.pid);
    const stop = await stopNow(first, 'SIGTERM');
    expect(stop.result.status).toBe(143);

    // A lock left by a process that is gone is stale: the next count takes it over and finishes.
    const gone = spawnSync('true');
    expect(gone.status).toBe(0);
    expect(gone.pid).toBeGreaterThan(0);
    writeFileSync(lock, `${gone.pid}\n`);
    await checkFinished(job, 'stale lock');
  }, 90_000);
});
