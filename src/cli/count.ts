/** `quern count`: count every n-gram up to order N of the inputs into a job directory. */
import * as os from 'node:os';
import type { Argv, CommandModule } from 'yargs';
import { CHUNK_BYTES_TARGET, MEMORY_DEFAULT_FRACTION, ORDER_MAX, PARTITIONS_DEFAULT, PARTITIONS_MAX } from '../limits.ts';
import { QuernError } from '../errors.ts';
import { runCount, type CountSummary } from '../job/pipeline.ts';
import type { JobConfig } from '../job/manifest.ts';
import { makeProgress } from './progress.ts';
import { formatBytes, intInRange, parseSize } from './options.ts';

export function defaultMemoryBytes(): number {
  return Math.max(1 << 30, Math.floor(os.totalmem() * MEMORY_DEFAULT_FRACTION));
}

/** Options shared by commands that read a corpus (count now; build and score later). */
/**
 * The input options of the commands that read text. `normalizeDefaults` false (score): the
 * normalisation options stay undefined when not given, so the model file's record applies.
 */
export function corpusOptions<T>(yargs: Argv<T>, normalizeDefaults = true) {
  return normalizeOptions(yargs, normalizeDefaults)
    .option('format', { choices: ['auto', 'text', 'jsonl'] as const, default: 'auto' as const, describe: 'Input format; auto: .jsonl/.ndjson (optionally .gz) is JSON Lines, anything else plain text' })
    .option('text-field', { type: 'string', describe: 'JSON Lines: dotted path of the text field, e.g. body.text' })
    .option('skip-bad', { type: 'boolean', default: false, describe: 'Skip bad lines and records (counted and reported) instead of stopping' });
}

/** The normalisation options (--lowercase, --unicode, --split): with `normalizeDefaults` false, for
 *  commands that read a model file, which records them. */
export function normalizeOptions<T>(yargs: Argv<T>, normalizeDefaults = true) {
  const recorded = normalizeDefaults ? '' : ' (default: as the model file records it)';
  return yargs
    .option('lowercase', { type: 'boolean', default: normalizeDefaults ? false : undefined, describe: `Lower-case every token (locale-independent)${recorded}` })
    .option('unicode', { choices: ['none', 'nfc', 'nfkc'] as const, default: normalizeDefaults ? 'none' as const : undefined, describe: `Unicode normalisation before splitting: NFC composes accents; NFKC also folds compatibility forms (ligatures, full-width letters)${recorded}` })
    .option('split', { choices: ['space', 'chars'] as const, default: normalizeDefaults ? 'space' as const : undefined, describe: `space: tokens are separated by white space; chars: every non-space character is a token (scripts written without spaces)${recorded}` });
}

/** `--token-files` of the commands that count (count, build). */
export const TOKEN_FILES_OPTION = {
  type: 'boolean',
  default: true,
  describe: 'Keep the vocabulary pass\'s tokens on disk (4 bytes per token and per sentence, e.g. 0.54× the benchmark corpus\'s text; removed when the count is done) so the count pass need not read and split the text again; --no-token-files saves the disk space (a gzip input is then one chunk, read by one worker)',
} as const;

export function printSummary(summary: CountSummary, out: NodeJS.WriteStream = process.stdout): void {
  const rows: Array<[string, string]> = [
    ['job', summary.jobDir],
    ['inputs', `${summary.inputs} (${formatBytes(summary.inputBytes)}, ${summary.chunks} chunks)`],
    ['lines', `${summary.lines} (${summary.sentences} sentences, ${summary.emptyLines} empty)`],
    ['tokens', `${summary.tokens}`],
    ['types', `${summary.typesSeen} seen; vocabulary ${summary.vocabularySize} with </s> and <unk>${summary.typesCapped ? `, ${summary.typesCapped} capped to <unk>` : ''}`],
  ];
  for (let n = 1; n <= summary.order; n++) {
    rows.push([`order ${n}`, `${summary.distinct[n - 1]} distinct of ${summary.occurrences[n - 1]} n-grams`]);
  }
  rows.push(['spills', `${summary.spills} (budget ${formatBytes(summary.memoryBytes)}, ${summary.workers} workers); ${summary.runFiles} run files, ${formatBytes(summary.runBytes)}`]);
  for (const s of summary.skipped) {
    const first = s.samples[0];
    rows.push(['skipped', `${s.skipped} in ${s.file}${first ? ` (first: line ${first.line ?? '?'}, ${first.reason})` : ''}`]);
  }
  rows.push(['elapsed', `${(summary.elapsedMs / 1000).toFixed(1)} s, ${summary.tokensPerSecond} tokens/s${summary.resumed ? ' (resumed job)' : ''}`]);
  const width = Math.max(...rows.map((r) => r[0].length));
  for (const [k, v] of rows) out.write(`${k.padEnd(width)}  ${v}\n`);
}

/** The job settings of the counting commands' options (count, build), checked. */
export function jobConfigOf(argv: Record<string, unknown>): JobConfig {
  const vocabTop = argv['vocab-top'] === undefined ? undefined : intInRange(argv['vocab-top'], '--vocab-top', 1, 2 ** 32 - 16);
  const vocabMinCount = argv['vocab-min-count'] === undefined ? undefined : intInRange(argv['vocab-min-count'], '--vocab-min-count', 1, Number.MAX_SAFE_INTEGER);
  const config: JobConfig = {
    order: intInRange(argv.order, '--order', 1, ORDER_MAX),
    partitions: intInRange(argv.partitions, '--partitions', 1, PARTITIONS_MAX),
    normalize: { lowercase: Boolean(argv.lowercase), unicode: argv.unicode as 'none', split: argv.split as 'space' },
    format: argv.format as 'auto',
    textField: typeof argv['text-field'] === 'string' ? argv['text-field'] : null,
    skipBad: Boolean(argv['skip-bad']),
    vocabCap: { ...(vocabTop !== undefined ? { top: vocabTop } : {}), ...(vocabMinCount !== undefined ? { minCount: vocabMinCount } : {}) },
    chunkBytes: parseSize(argv['chunk-size'] as string, '--chunk-size'),
  };
  if (config.textField !== null && !/^[^.]+(\.[^.]+)*$/.test(config.textField)) {
    throw new QuernError('config', `--text-field expects a dotted path such as body.text, got '${config.textField}'`);
  }
  return config;
}

export const countCommand: CommandModule = {
  command: 'count <inputs..>',
  describe: 'Count every n-gram up to --order of the inputs (files, directories, globs) into a job directory',
  builder: (yargs) => corpusOptions(yargs
    .positional('inputs', { type: 'string', array: true, describe: 'Files, directories (recursively) or glob patterns' })
    .option('job', { type: 'string', demandOption: true, describe: 'Job directory (created if needed; re-running continues it)' })
    .option('order', { type: 'number', default: 3, describe: `Highest n-gram order, 1 to ${ORDER_MAX}` })
    .option('workers', { type: 'number', default: os.availableParallelism(), describe: 'Worker threads' })
    .option('memory', { type: 'string', describe: 'Budget for all counting memory together, e.g. 2GiB (default: a quarter of RAM, at least 1 GiB)' })
    .option('vocab-top', { type: 'number', describe: 'Keep the K most frequent word types; the rest count as <unk>' })
    .option('vocab-min-count', { type: 'number', describe: 'Keep word types seen at least C times; the rest count as <unk>' })
    .option('partitions', { type: 'number', default: PARTITIONS_DEFAULT, describe: 'Partitions of the n-gram space (independent merge tasks)' })
    .option('chunk-size', { type: 'string', default: String(CHUNK_BYTES_TARGET), describe: 'Split plain inputs into line-aligned chunks of about this size' })
    .option('token-files', TOKEN_FILES_OPTION)
    .option('restart', { type: 'boolean', default: false, describe: 'Discard an existing job in --job and start over' })
    .option('add', { type: 'boolean', default: false, describe: 'Add these inputs to the counted job in --job: only they are read; the store is rebuilt' })
    .option('quiet', { type: 'boolean', default: false, describe: 'No progress display' })
    .option('json', { type: 'boolean', default: false, describe: 'Print the summary as JSON' }))
    .example('$0 count corpus/ --job job --order 5 --memory 4GiB', 'Count orders 1..5 of every file under corpus/')
    .example('$0 count "crawl/*.jsonl.gz" --text-field body.text --job job', 'Count the text at body.text of JSON Lines shards')
    .example('$0 count new-shards/ --job job --order 5 --add', 'Add shards to a counted job'),
  handler: async (argv) => {
    const config = jobConfigOf(argv);
    if (argv.add && argv.restart) throw new QuernError('config', '--add and --restart cannot go together: --restart discards the job that --add would extend');
    const workers = intInRange(argv.workers, '--workers', 1, 256);
    const memoryBytes = argv.memory === undefined ? defaultMemoryBytes() : parseSize(argv.memory as string, '--memory');
    const summary = await runCount({
      jobDir: argv.job as string,
      inputSpecs: argv.inputs as string[],
      config,
      workers,
      memoryBytes,
      restart: Boolean(argv.restart),
      add: Boolean(argv.add),
      tokenFiles: argv['token-files'] !== false,
      progress: makeProgress(argv.quiet ? 'quiet' : 'auto'),
    });
    if (argv.json) process.stdout.write(JSON.stringify(summary, null, 2) + '\n');
    else printSummary(summary);
  },
};
