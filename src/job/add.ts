/**
 * Adding inputs to a counted job. Only the new shards are read and counted; the runs of the earlier
 * chunks are re-keyed to the new vocabulary's ids (which rank all words again by count) without
 * reading their text; then the store is merged again from all runs. The result equals counting all
 * shards from scratch (test/e2e/add.test.ts).
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { REMAP_SPILL_STRIDE } from '../limits.ts';
import { planChunks } from '../corpus/plan.ts';
import type { InputFile } from '../corpus/types.ts';
import type { Vocabulary } from '../corpus/vocabulary.ts';
import type { RemapDone } from '../count/protocol.ts';
import { baseInit, counterBudgetPerWorker, PREVIOUS_VOCAB_FILE, readPreviousVocabulary, VOCAB_FILE } from '../count/stage.ts';
import { STATS_FILE } from '../merge/stage.ts';
import { STORE_DIR } from '../merge/store.ts';
import type { StageContext } from './context.ts';
import { writeFileAtomic } from './fsio.ts';
import type { JobManifest } from './manifest.ts';

/**
 * Records the addition of `added` inputs in the job (atomically, in one manifest write, after the
 * previous vocabulary is saved): new chunks, stages to redo, the store to rebuild.
 */
export async function beginAddition(ctx: StageContext, added: InputFile[]): Promise<void> {
  const { job, jobDir } = ctx;
  if (job.stages.count.status !== 'done' || job.stages.remap?.status === 'running') {
    throw new QuernError('config', `the job in ${jobDir} has not finished counting; re-run its original command before adding inputs`);
  }
  if (job.config.vocabCap.top !== undefined || job.config.vocabCap.minCount !== undefined) {
    throw new QuernError('config', `the job in ${jobDir} caps its vocabulary: words it mapped to <unk> cannot be told apart again, so added inputs need a full recount (--restart with all inputs)`);
  }
  await writeFileAtomic(ctx.fs, path.join(jobDir, PREVIOUS_VOCAB_FILE), await fsp.readFile(path.join(jobDir, VOCAB_FILE)));
  const fileBase = job.inputs.length;
  const chunkBase = job.chunks.length;
  const planned = await planChunks(added, job.config.chunkBytes, ctx.tokenFiles ? { splitGzipFor: { workers: ctx.workers } } : {});
  job.inputs.push(...added);
  job.chunks.push(...planned.map((c) => ({ ...c, index: c.index + chunkBase, fileIndex: c.fileIndex + fileBase })));
  job.stages.vocab = {
    status: 'pending',
    previousSha: job.stages.vocab.sha256!,
    reads: [...(job.stages.vocab.reads ?? []), ...planned.map(() => null)],
    elapsedMs: job.stages.vocab.elapsedMs,
  };
  job.stages.remap = {
    status: 'pending',
    chunks: job.stages.count.chunks.map((c) => c.chunk),
    chunksDone: [],
    generation: (job.stages.remap?.generation ?? 0) + 1,
  };
  job.stages.count.status = 'pending';
  job.stages.merge = { status: 'pending', partitionsDone: [] };
  job.stages.continuation = { status: 'pending', emitted: [], partitionsDone: [] };
  await ctx.saveManifest();
  await fsp.rm(path.join(jobDir, STORE_DIR), { recursive: true, force: true });
  await fsp.rm(path.join(jobDir, STATS_FILE), { force: true });
}

/** Re-keys the runs of the chunks counted before the addition, one chunk per task. */
export async function remapStage(ctx: StageContext, vocab: Vocabulary): Promise<void> {
  const { job, jobDir } = ctx;
  const remap = job.stages.remap;
  if (remap === undefined || remap.status === 'done') return;
  const previous = await readPreviousVocabulary(jobDir, job);
  const newIds = new Map(vocab.words.map((w, id) => [w, id]));
  const idMap = Uint32Array.from(previous.words, (w) => {
    const id = newIds.get(w);
    if (id === undefined) throw new QuernError('corrupt', `word '${w}' of the previous vocabulary is missing from the new one`);
    return id;
  });
  const done = new Set(remap.chunksDone);
  const todo = remap.chunks.filter((c) => !done.has(c));
  const workers = Math.min(ctx.workers, Math.max(1, todo.length));
  const init = {
    ...baseInit(job, jobDir, 'remap'),
    idMap,
    idMax: vocab.words.length,
    spillBase: remap.generation * REMAP_SPILL_STRIDE,
    counterBytesMax: counterBudgetPerWorker(ctx.memoryBytes, workers, 0),
  };
  remap.status = 'running';
  const byChunk = new Map(job.stages.count.chunks.map((c) => [c.chunk, c]));
  ctx.progress.start('re-keying earlier runs', todo.length, 'tasks');
  await ctx.pool.run<number, RemapDone, unknown>(init, todo, {
    message: (chunk) => ({ type: 'remap', chunk, files: byChunk.get(chunk)!.runs.map((r) => r.file) }),
    onDone: async (result) => {
      ctx.progress.update(1, 0);
      const entry = byChunk.get(result.chunk)!;
      const old = entry.runs;
      entry.runs = result.runs;
      remap.chunksDone.push(result.chunk);
      await ctx.saveManifest();
      for (const run of old) await ctx.fs.unlink(path.join(jobDir, run.file));
    },
  }).finally(() => ctx.progress.stop());
  remap.status = 'done';
  delete job.stages.vocab.previousSha;
  await ctx.saveManifest();
  await fsp.rm(path.join(jobDir, PREVIOUS_VOCAB_FILE), { force: true });
}

/** Inputs of `requested` that the job does not hold yet (by path). */
export function newInputs(job: JobManifest, requested: InputFile[]): InputFile[] {
  const known = new Set(job.inputs.map((f) => f.path));
  return requested.filter((f) => !known.has(f.path));
}
