/** `quern pack`: a job's finished estimate, or an ARPA model file → a Quern model file
 *  (docs/model-file.md). */
import { stat } from 'node:fs/promises';
import type { CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { openJobModelSource } from '../estimate/job-model-source.ts';
import { readManifest } from '../job/manifest.ts';
import type { ModelSource } from '../estimate/model-source.ts';
import { stageFs } from '../job/fsio.ts';
import { openArpaSource } from '../pack/arpa.ts';
import { ENCODING_NAMES } from '../pack/format.ts';
import { Spool } from '../pack/spool.ts';
import { packModelSource, type PackOptions, type PackSummary } from '../pack/writer.ts';
import { ARPA_SORT_BYTES_DEFAULT } from '../limits.ts';
import { formatBytes, parseSize } from './options.ts';
import { withPackCleanup } from './pack-signals.ts';

/** One line about a packed file: where, what, how big. */
export function formatPackSummary(summary: PackSummary): string {
  const ngrams = summary.ngrams.reduce((sum, rows) => sum + rows, 0);
  return `packed ${summary.filePath}: order ${summary.ngrams.length}, n-grams ${summary.ngrams.map((rows) => rows.toLocaleString('en-US')).join(' + ')}, ` +
    `${ENCODING_NAMES[summary.encoding]} values, ${summary.bytes.toLocaleString('en-US')} bytes (${(summary.bytes / ngrams).toFixed(2)} per n-gram)\n`;
}

/** The source of `quern pack`'s model: a job directory's finished estimate, or an ARPA file (its
 *  orders ≥ 2 sorted into id order in temporary files beside the model; `remove` deletes them). */
async function openPackSource(given: string, out: string, sortBytes: number, options: PackOptions): Promise<{ source: ModelSource; remove: () => Promise<void> }> {
  const isDirectory = await stat(given).then((info) => info.isDirectory(), () => false);
  if (isDirectory) {
    const job = await readManifest(given);
    if (!job) throw new QuernError('config', `${given} is a directory but not a quern job (no job.json): give a job directory with a finished estimate, or an ARPA file`);
    // What `quern estimate` records: the inputs' fingerprints, and the count's normalisation.
    options.fingerprint ||= job.inputs.map((f) => f.fingerprint).join(',');
    options.normalize = job.config.normalize;
    return { source: await openJobModelSource(given, { threads: true }), remove: async () => {} };
  }
  const source = await openArpaSource(given, (n, name) => Spool.create(stageFs(), `${out}.${process.pid}.arpa-o${n}-${name}.tmp`), { sortBytes, imported: true });
  if (source.header.parameters.method === 'imported') {
    process.stderr.write(`quern: ${given} does not say how it was estimated (no quern-model line): packed as what the format says, a back-off model of log10 probabilities, method "imported"\n`);
  }
  return { source, remove: () => source.remove() };
}

export const packCommand: CommandModule = {
  command: 'pack <source>',
  describe: 'Pack a job\'s estimate (again: other value widths or codes) or a model in the ARPA format into one memory-mappable model file',
  builder: (yargs) => yargs
    .positional('source', { type: 'string', describe: 'A job directory with a finished estimate (quern estimate); or an ARPA file, plain or gzip: one written by quern export (it records how the model was estimated), or by another program (packed as a back-off model of log10 probabilities, method "imported")' })
    .option('out', { type: 'string', demandOption: true, describe: 'The model file to write (atomically)' })
    .option('quant', { type: 'number', choices: [8, 16], describe: 'Quantise log10 probabilities and back-off weights to 8 or 16 bits (codebooks fitted per order)' })
    .option('float', { type: 'number', choices: [32, 64], describe: 'Store unquantised values as float32 (default) or float64' })
    .option('fingerprint', { type: 'string', default: '', describe: 'Corpus fingerprint to record in the file (default for a job: its inputs\' fingerprints)' })
    .option('memory', { type: 'string', describe: `ARPA: memory for sorting one order's n-grams into id order, e.g. 1GiB (default ${formatBytes(ARPA_SORT_BYTES_DEFAULT)}); a larger order is sorted in runs on disk beside --out` })
    .conflicts('quant', 'float')
    .example('$0 pack job --out model-8bit.qm --quant 8', 'The job\'s estimate again, with 8-bit codes')
    .example('$0 pack model.arpa --out model.qm --quant 8', 'An ARPA file, as an 8-bit model file'),
  handler: async (argv) => {
    const out = argv.out as string;
    if (out === '') throw new QuernError('config', '--out expects a file name');
    const sortBytes = argv.memory === undefined ? ARPA_SORT_BYTES_DEFAULT : parseSize(argv.memory as string, '--memory');
    const options: PackOptions = { fingerprint: argv.fingerprint as string };
    if (argv.quant !== undefined) options.quantBits = argv.quant as 8 | 16;
    if (argv.float !== undefined) options.floatBits = argv.float as 32 | 64;
    const summary = await withPackCleanup(out, async () => {
      const { source, remove } = await openPackSource(argv.source as string, out, sortBytes, options);
      try {
        return await packModelSource(source, options, stageFs(), out);
      } finally {
        await remove();
      }
    });
    process.stdout.write(formatPackSummary(summary));
  },
};
