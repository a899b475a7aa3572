/**
 * `quern estimate`: a counted job → a smoothed model, packed into one model file.
 * Every method but Jelinek-Mercer is estimated partition by partition in worker threads, with
 * bounded memory and resumably (src/estimate/stream-stage.ts); Jelinek-Mercer fits its weights by
 * EM with lookups into the whole model, so it reads the counts into memory (refused beyond --memory).
 */
import { readFileSync } from 'node:fs';
import * as path from 'node:path';
import type { Argv, CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { ORDER_MAX } from '../limits.ts';
import { stageFs } from '../job/fsio.ts';
import { readManifest } from '../job/manifest.ts';
import { makeTokenizer } from '../corpus/tokenize.ts';
import * as os from 'node:os';
import { loadCountTables } from '../estimate/from-store.ts';
import { isPlanned } from '../estimate/method-plan.ts';
import { estimateJobStreaming } from '../estimate/stream-stage.ts';
import type { ProgressSink } from '../job/context.ts';
import { makeProgress } from './progress.ts';
import { intInRange } from './options.ts';
import { estimate, type EstimateRequest } from '../estimate/estimate.ts';
import { packModelSource, type PackOptions } from '../pack/writer.ts';
import { modelSource, type ModelSource } from '../estimate/model-source.ts';
import { formatPackSummary } from './pack.ts';
import { defaultMemoryBytes } from './count.ts';
import { parseSize } from './options.ts';

export const METHODS = ['modified-kneser-ney', 'kneser-ney', 'absolute-discounting', 'katz', 'witten-bell', 'jelinek-mercer', 'stupid-backoff'] as const;

/** Options shared by `estimate` and `build`. */
export function estimateOptions<T>(yargs: Argv<T>) {
  return yargs
    .option('method', { choices: METHODS, default: 'modified-kneser-ney' as const, describe: 'Smoothing method (stupid-backoff gives scores, not probabilities)' })
    .option('fallback', { type: 'boolean', default: false, describe: 'Where a discount is undefined or out of range, use the documented fallback values instead of stopping' })
    .option('cutoffs', { type: 'string', describe: 'Minimum count per order, comma-separated from order 1 (e.g. 1,1,2,2); lower n-grams are dropped, their mass goes to the lower order' })
    .option('katz-k', { type: 'number', default: 5, describe: 'Katz: counts above k are not discounted' })
    .option('alpha', { type: 'number', default: 0.4, describe: 'Stupid backoff: the back-off factor' })
    .option('heldout', { type: 'string', describe: 'Jelinek-Mercer: held-out text (one sentence per line) to fit the weights by EM' })
    .option('bucketed', { type: 'boolean', default: false, describe: 'Jelinek-Mercer: one weight per order and context-count bucket' })
    .option('quant', { type: 'number', choices: [8, 16], describe: 'Quantise the packed values to 8 or 16 bits' });
}

interface EstimateArgs {
  method: (typeof METHODS)[number];
  fallback: boolean;
  cutoffs?: string;
  'katz-k': number;
  alpha: number;
  heldout?: string;
  bucketed: boolean;
  quant?: number;
}

/** How `estimateJob` runs: memory, threads, progress, and whether to discard earlier results. */
export interface EstimateRun {
  memoryBytes: number;
  workers: number;
  progress: ProgressSink;
  restart: boolean;
  /** Hears notes for the user (stderr on the command line). */
  notice?: (line: string) => void;
}

/** Estimates the model of a finished job and packs it; returns the summary line. */
export async function estimateJob(jobDir: string, out: string, argv: EstimateArgs, run: EstimateRun): Promise<{ line: string }> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  const request: Record<string, unknown> = { method: argv.method, fallback: argv.fallback };
  if (argv.cutoffs !== undefined) {
    const cutoffs = argv.cutoffs.split(',').map(Number);
    if (cutoffs.length !== job.config.order || cutoffs.some((c) => !Number.isInteger(c) || c < 1)) {
      throw new QuernError('config', `--cutoffs expects ${job.config.order} whole numbers ≥ 1, one per order (e.g. ${Array.from({ length: job.config.order }, (_, i) => (i < 2 ? 1 : 2)).join(',')}), got '${argv.cutoffs}'`);
    }
    request.cutoffs = cutoffs;
  }
  if (argv.method === 'katz') request.k = argv['katz-k'];
  if (argv.method === 'stupid-backoff') request.alpha = argv.alpha;
  let source: ModelSource;
  const planned = request as EstimateRequest;
  if (isPlanned(planned)) {
    // The partitions' results, read order by order: the model is never gathered in memory.
    ({ source } = await estimateJobStreaming({ jobDir, request: planned, memoryBytes: run.memoryBytes, workers: run.workers, progress: run.progress, restart: run.restart, handleSignals: true }));
  } else {
    if (argv.heldout === undefined) throw new QuernError('config', 'jelinek-mercer fits its weights on held-out text: give --heldout FILE');
    run.notice?.('quern: jelinek-mercer is estimated in memory, not partition by partition: fitting its weights by EM looks n-grams up across the whole model. Jobs whose counts exceed --memory are refused; the other methods are not limited so.\n');
    const counts = await loadCountTables(jobDir, run.memoryBytes);
    const tokenize = makeTokenizer(job.config.normalize);
    const ids = new Map(counts.vocabulary.words.map((w, id) => [w, id]));
    const tokens: string[] = [];
    request.heldOut = readFileSync(argv.heldout, 'utf8').split('\n').filter((l) => l.trim() !== '').map((line) => {
      const n = tokenize(line, tokens);
      return Uint32Array.from(tokens.slice(0, n), (w) => ids.get(w) ?? counts.vocabulary.unkId);
    });
    request.bucketed = argv.bucketed;
    source = modelSource(estimate(counts, request as EstimateRequest));
  }
  const options: PackOptions = { fingerprint: job.inputs.map((f) => f.fingerprint).join(','), normalize: job.config.normalize };
  if (argv.quant !== undefined) options.quantBits = argv.quant as 8 | 16;
  const summary = await packModelSource(source, options, stageFs(), out);
  return { line: formatPackSummary(summary) };
}

export const estimateCommand: CommandModule = {
  command: 'estimate <job>',
  describe: 'Estimate a smoothed model from a counted job and pack it into one model file',
  builder: (yargs) => estimateOptions(yargs
    .positional('job', { type: 'string', describe: 'Job directory of a finished count' })
    .option('out', { type: 'string', describe: 'Model file to write (default: JOB/model.qm)' })
    .option('memory', { type: 'string', describe: 'Memory for the partitions estimated at once (Jelinek-Mercer: for all count tables); default a quarter of RAM, at least 1 GiB' })
    .option('workers', { type: 'number', default: os.availableParallelism(), describe: 'Worker threads (partitions estimated at once)' })
    .option('restart', { type: 'boolean', default: false, describe: 'Discard the results of an interrupted estimate and start over' })
    .option('quiet', { type: 'boolean', default: false, describe: 'No progress display' }))
    .example('$0 estimate job --method katz --out katz.qm', 'A Katz back-off model'),
  handler: async (argv) => {
    const jobDir = argv.job as string;
    const out = (argv.out as string | undefined) ?? path.join(jobDir, 'model.qm');
    const memoryBytes = argv.memory === undefined ? defaultMemoryBytes() : parseSize(argv.memory as string, '--memory');
    const { line } = await estimateJob(jobDir, out, argv as unknown as EstimateArgs, {
      memoryBytes,
      workers: intInRange(argv.workers, '--workers', 1, 256),
      progress: makeProgress(argv.quiet ? 'quiet' : 'auto'),
      restart: Boolean(argv.restart),
      notice: argv.quiet ? undefined : (line) => process.stderr.write(line),
    });
    process.stdout.write(line);
  },
};
