/**
 * `quern build`: the whole job in one command — count (resumable), report's diagnostics, estimate
 * (resumable, partition by partition), pack. Re-running continues an interrupted count or estimate
 * (finished partitions are kept); the pack runs again and the model file is replaced atomically.
 */
import * as os from 'node:os';
import * as path from 'node:path';
import type { CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { CHUNK_BYTES_TARGET, ORDER_MAX, PARTITIONS_DEFAULT } from '../limits.ts';
import { runCount } from '../job/pipeline.ts';
import { loadStatsInput } from '../stats/job-stats.ts';
import { buildReport } from '../stats/report.ts';
import { corpusOptions, defaultMemoryBytes, jobConfigOf, printSummary, TOKEN_FILES_OPTION } from './count.ts';
import { estimateJob, estimateOptions } from './estimate.ts';
import { intInRange, parseSize } from './options.ts';
import { makeProgress } from './progress.ts';

export const buildCommand: CommandModule = {
  command: 'build <inputs..>',
  describe: 'Count, report, estimate and pack in one command (resumable like quern count)',
  builder: (yargs) => estimateOptions(corpusOptions(yargs
    .positional('inputs', { type: 'string', array: true, describe: 'Files, directories or glob patterns' })
    .option('out', { type: 'string', demandOption: true, describe: 'The model file to write' })
    .option('job', { type: 'string', describe: 'Job directory (default: OUT.job)' })
    .option('order', { type: 'number', default: 3, describe: `Highest n-gram order, 1 to ${ORDER_MAX}` })
    .option('workers', { type: 'number', default: os.availableParallelism(), describe: 'Worker threads' })
    .option('partitions', { type: 'number', default: PARTITIONS_DEFAULT, describe: 'Partitions of the n-gram space: more make each estimate task smaller (less memory)' })
    .option('memory', { type: 'string', describe: 'Budget for counting memory, e.g. 2GiB (default: a quarter of RAM, at least 1 GiB)' })
    .option('vocab-top', { type: 'number', describe: 'Keep the K most frequent word types; the rest count as <unk>' })
    .option('vocab-min-count', { type: 'number', describe: 'Keep word types seen at least C times; the rest count as <unk>' })
    .option('chunk-size', { type: 'string', default: String(CHUNK_BYTES_TARGET), describe: 'Split plain inputs into line-aligned chunks of about this size' })
    .option('token-files', TOKEN_FILES_OPTION)
    .option('quiet', { type: 'boolean', default: false, describe: 'No progress display' })))
    .example('$0 build corpus/ --order 4 --out model.qm', 'A modified Kneser-Ney model of order 4'),
  handler: async (argv) => {
    const out = argv.out as string;
    if (out === '') throw new QuernError('config', '--out expects a file name');
    const jobDir = (argv.job as string | undefined) ?? `${out}.job`;
    const config = jobConfigOf(argv);
    const memoryBytes = argv.memory === undefined ? defaultMemoryBytes() : parseSize(argv.memory as string, '--memory');
    const summary = await runCount({
      jobDir, inputSpecs: argv.inputs as string[], config, workers: intInRange(argv.workers, '--workers', 1, 256),
      memoryBytes, restart: false, tokenFiles: argv['token-files'] !== false, progress: makeProgress(argv.quiet ? 'quiet' : 'auto'),
    });
    if (!argv.quiet) printSummary(summary, process.stderr);
    const report = buildReport(await loadStatsInput(jobDir));
    for (const d of report.diagnostics) process.stderr.write(`${d.severity.toUpperCase()}: ${d.title}\n`);
    const { line } = await estimateJob(path.resolve(jobDir), out, argv as never, {
      memoryBytes,
      workers: intInRange(argv.workers, '--workers', 1, 256),
      progress: makeProgress(argv.quiet ? 'quiet' : 'auto'),
      restart: false,
      notice: argv.quiet ? undefined : (line) => process.stderr.write(line),
    });
    process.stdout.write(line);
  },
};
