/**
 * `quern build`: the whole job in one command — count (resumable), report's diagnostics, estimate
 * (resumable, partition by partition), pack. Re-running continues an interrupted count or estimate
 * (finished partitions are kept); the pack runs again and the model file is replaced atomically.
 */
import * as os from 'node:os';
import * as path from 'node:path';
import type { CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { CHUNK_BYTES_TARGET, ORDER_MAX, PARTITIONS_DEFAULT, PARTITIONS_MAX } from '../limits.ts';
import { runCount } from '../job/pipeline.ts';
import type { JobConfig } from '../job/manifest.ts';
import { loadStatsInput } from '../stats/job-stats.ts';
import { buildReport } from '../stats/report.ts';
import { corpusOptions, defaultMemoryBytes, printSummary, TOKEN_FILES_OPTION } from './count.ts';
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
    .option('vocab-min-count', { type: 'number', describe: 'Keep word types seen at least C times; the rest count as <unk>' })
    .option('token-files', TOKEN_FILES_OPTION)
    .option('quiet', { type: 'boolean', default: false, describe: 'No progress display' })))
    .example('$0 build corpus/ --order 4 --out model.qm', 'A modified Kneser-Ney model of order 4'),
  handler: async (argv) => {
    const out = argv.out as string;
    if (out === '') throw new QuernError('config', '--out expects a file name');
    const jobDir = (argv.job as string | undefined) ?? `${out}.job`;
    const minCount = argv['vocab-min-count'] === undefined ? undefined : intInRange(argv['vocab-min-count'], '--vocab-min-count', 1, Number.MAX_SAFE_INTEGER);
    const config: JobConfig = {
      order: intInRange(argv.order, '--order', 1, ORDER_MAX),
      partitions: intInRange(argv.partitions, '--partitions', 1, PARTITIONS_MAX),
      normalize: { lowercase: Boolean(argv.lowercase), unicode: argv.unicode as 'none', split: argv.split as 'space' },
      format: argv.format as 'auto',
      textField: typeof argv['text-field'] === 'string' ? argv['text-field'] : null,
      skipBad: Boolean(argv['skip-bad']),
      vocabCap: minCount === undefined ? {} : { minCount },
      chunkBytes: CHUNK_BYTES_TARGET,
    };
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
