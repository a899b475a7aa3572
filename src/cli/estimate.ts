/**
 * `quern estimate`: a counted job → a smoothed model, packed into one model file.
 * Every method is estimated partition by partition in worker threads, with bounded memory and
 * resumably (src/estimate/stream-stage.ts); Jelinek-Mercer first fits its weights by EM on the
 * held-out text, looking its n-grams up in the job's store (src/estimate/heldout-store.ts).
 */
import * as path from 'node:path';
import type { Argv, CommandModule } from 'yargs';
import { assert, QuernError } from '../errors.ts';
import { ORDER_MAX } from '../limits.ts';
import { stageFs } from '../job/fsio.ts';
import { readManifest } from '../job/manifest.ts';
import * as os from 'node:os';
import { fitWeightsOnJob, readHeldOutText } from '../estimate/heldout-store.ts';
import { formatInterpolationWeights } from '../estimate/jelinek-mercer.ts';
import { isPlanned } from '../estimate/method-plan.ts';
import { estimateJobStreaming } from '../estimate/stream-stage.ts';
import type { ProgressSink } from '../job/context.ts';
import { makeProgress } from './progress.ts';
import { intInRange } from './options.ts';
import type { EstimateRequest } from '../estimate/estimate.ts';
import { packModelSource, type PackOptions } from '../pack/writer.ts';
import { withPackCleanup } from './pack-signals.ts';
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
  if (argv.method === 'jelinek-mercer') {
    if (argv.heldout === undefined) throw new QuernError('config', 'jelinek-mercer fits its weights on held-out text: give --heldout FILE');
    const heldOut = await readHeldOutText(argv.heldout, jobDir, job);
    run.notice?.(`quern: fitting the Jelinek-Mercer weights on ${heldOut.length} held-out sentences from ${argv.heldout}\n`);
    const weights = await fitWeightsOnJob(jobDir, heldOut, { bucketed: argv.bucketed, cutoffs: request.cutoffs as number[] | undefined }, run.progress);
    for (const line of formatInterpolationWeights(weights)) run.notice?.(`quern: ${line}\n`);
    request.weights = weights;
  }
  const planned = request as EstimateRequest;
  assert(isPlanned(planned), 'every method has a plan once Jelinek-Mercer\'s weights are fitted');
  // The partitions' results, read order by order: the model is never gathered in memory.
  const { source } = await estimateJobStreaming({ jobDir, request: planned, memoryBytes: run.memoryBytes, workers: run.workers, progress: run.progress, restart: run.restart, handleSignals: true });
  const options: PackOptions = { fingerprint: job.inputs.map((f) => f.fingerprint).join(','), normalize: job.config.normalize };
  if (argv.quant !== undefined) options.quantBits = argv.quant as 8 | 16;
  const summary = await withPackCleanup(out, () => packModelSource(source, options, stageFs(), out));
  return { line: formatPackSummary(summary) };
}

export const estimateCommand: CommandModule = {
  command: 'estimate <job>',
  describe: 'Estimate a smoothed model from a counted job and pack it into one model file',
  builder: (yargs) => estimateOptions(yargs
    .positional('job', { type: 'string', describe: 'Job directory of a finished count' })
    .option('out', { type: 'string', describe: 'Model file to write (default: JOB/model.qm)' })
    .option('memory', { type: 'string', describe: 'Memory for the partitions estimated at once; default a quarter of RAM, at least 1 GiB' })
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
