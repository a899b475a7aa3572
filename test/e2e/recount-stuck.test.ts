/**
 * Regression: a damaged run's recount stopped by an I/O fault part way used to leave job.json
 * naming runs already removed, so no re-run could finish. The recount now records before it removes.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { expect, it } from 'vitest';
import { captureReference, countArgs, expectLikeReference, readJob, removeDir, runAndStopWhen, runToEnd, scratchDir, writeCrashCorpus } from '../support/crash.ts';

it('a fault during the recount of a damaged run leaves a job that the re-run finishes', async () => {
  const dir = scratchDir('quern-recount-');
  const corpus = writeCrashCorpus(dir);
  const job = path.join(dir, 'job');
  const args = countArgs(corpus, job);
  args[args.indexOf('--workers') + 1] = '1'; // not part of the job: partition 0 is then merged first
  const stop = await runAndStopWhen(args, job, () => readJob(job)?.stages.count.status === 'done');
  expect(stop.stopped).toBe(true);
  // Damage the header of a run of order 1 in partition 0: the first file the merge opens.
  const run = readJob(job)!.stages.count.chunks.flatMap((c) => c.runs).find((r) => r.order === 1 && r.partition === 0)!;
  const file = path.join(job, run.file);
  const bytes = readFileSync(file);
  bytes[10] ^= 0xff;
  writeFileSync(file, bytes);
  // Main thread: operation 1 mkdir; then the recount begins. Operation 3 fails: today the second
  // unlink of the chunk's runs (the first run is gone, job.json still records it).
  const failed = await runToEnd(args, { QUERN_TEST_FAULT: JSON.stringify({ failAfterOperations: 2, mode: 'once', errno: 'EIO' }) });
  expect(failed.status, failed.stderr).toBe(4);
  let rerun = await runToEnd(args);
  if (rerun.status === 5) rerun = await runToEnd(args); // the damage found (again): recounted now
  expect(rerun.status, rerun.stderr).toBe(0); // today: 4, "cannot open …/c00000N-s000.run: ENOENT", on every re-run
  const reference = path.join(dir, 'reference');
  expect((await runToEnd(countArgs(corpus, reference))).status).toBe(0);
  await expectLikeReference(job, await captureReference(reference), 'after the recount');
  removeDir(dir);
}, 120_000);
