/** `quern info`: what a model file holds, after verifying every checksum (with --check, also the
 *  structure of every order: a pass over every n-gram). */
import type { CommandModule } from 'yargs';
import type { MethodParameters, OrderDiscounts } from '../estimate/model.ts';
import { openModel, type PackedModel } from '../pack/reader.ts';
import { describeNormalize } from '../score/normalization.ts';
import { formatQuantEffect, measureQuantEffect } from './quant-effect.ts';

/** The method's parameters in a few words per order. */
export function describeParameters(parameters: MethodParameters): string[] {
  const discounts = (list: OrderDiscounts[]): string[] => list
    .filter((entry) => entry.values.length > 0)
    .map((entry) => `order ${entry.order}: ${entry.names.map((name, i) => `${name} = ${entry.values[i].toFixed(4)}`).join(', ')} (${entry.source})`);
  switch (parameters.method) {
    case 'modified-kneser-ney':
    case 'kneser-ney':
    case 'absolute-discounting':
      return discounts(parameters.discounts);
    case 'katz':
      return [`k = ${parameters.k}, unigram level: ${parameters.unigramLevel}`, ...discounts(parameters.discounts)];
    case 'jelinek-mercer':
      return parameters.weights.orders.map((entry) => `order ${entry.order}: λ = ${entry.buckets.map((bucket) => bucket.weight.toFixed(4)).join(', ')}`);
    case 'stupid-backoff':
      return [`α = ${parameters.alpha}`];
    default:
      return [];
  }
}

/** The text `quern info` prints. */
export function formatModelInfo(model: PackedModel): string {
  const total = model.ngrams.reduce((sum, rows) => sum + rows, 0);
  const lines = [
    `${model.filePath}: Quern model file, format ${model.version.major}.${model.version.minor}, ${model.fileBytes.toLocaleString('en-US')} bytes, ` +
      `every checksum verified${model.structureChecked ? ', structure checked' : ''}`,
    `order        ${model.order}`,
    `vocabulary   ${model.vocabularySize.toLocaleString('en-US')} words (</s> and <unk> included, <s> not)`,
    `n-grams      ${model.ngrams.map((rows, i) => `order ${i + 1}: ${rows.toLocaleString('en-US')}`).join(', ')}; ${total.toLocaleString('en-US')} in all, ${(model.fileBytes / total).toFixed(2)} bytes each`,
    `values       ${model.encodingName}`,
    `lookups      ${model.engine === 'wasm' ? 'WebAssembly (step), the file in one WebAssembly memory' : 'JavaScript (the file needs more than one WebAssembly memory holds, or none could be had)'}`,
    `method       ${model.parameters.method}${model.normalised ? '' : ' (scores, not probabilities)'}`,
    ...describeParameters(model.parameters).map((line) => `             ${line}`),
    `cutoffs      ${model.cutoffs.join(' ')}`,
    `cap          ${model.vocabularyCap === null ? 'none' : JSON.stringify(model.vocabularyCap)}`,
    `text         ${model.normalize === null ? 'normalisation not recorded' : `normalised as ${describeNormalize(model.normalize)}`}`,
    `fingerprint  ${model.fingerprint === '' ? '(none)' : model.fingerprint}`,
    'sections',
    ...model.sections.map((section) => `  ${section.name.padEnd(32)} ${section.offset.toString().padStart(12)}  ${section.bytes.toLocaleString('en-US').padStart(15)} bytes  crc32 ${section.crc32.toString(16).padStart(8, '0')}`),
  ];
  return lines.join('\n') + '\n';
}

export const infoCommand: CommandModule = {
  command: 'info <model>',
  describe: 'Describe a model file (order, vocabulary, n-grams per order, method, parameters, sections), verifying it',
  builder: (yargs) => yargs
    .positional('model', { type: 'string', describe: 'Model file written by quern pack' })
    .option('json', { type: 'boolean', default: false, describe: 'Print the description as JSON' })
    .option('check', { type: 'boolean', default: false, describe: 'Also check the structure of every order (children ranges, word id order, codes): a pass over every n-gram' })
    .option('heldout', { type: 'string', array: true, describe: 'Held-out text (plain or gzip; normalised as the model file records): its perplexity with the values as stored and, for a file of floats, with the 16- and 8-bit codes quern pack --quant would give (each packed into a temporary file beside the model)' })
    .example('$0 info model.qm', 'What the file holds; exit status 5 if it is damaged')
    .example('$0 info model.qm --check', 'The same, after checking every n-gram of the file, not only its checksums')
    .example('$0 info model.qm --heldout dev.txt', 'What 16- and 8-bit codes would cost in held-out perplexity'),
  handler: async (argv) => {
    const heldout = argv.heldout as string[] | undefined;
    const model = await openModel(argv.model as string, { checkStructure: Boolean(argv.check), shared: heldout !== undefined });
    const quantisation = heldout === undefined ? undefined : await measureQuantEffect(model, heldout, argv.json ? () => {} : (line) => process.stderr.write(line));
    if (!argv.json) {
      process.stdout.write(formatModelInfo(model) + (quantisation === undefined ? '' : formatQuantEffect(quantisation)));
      return;
    }
    const { filePath, version, fileBytes, order, vocabularySize, ngrams, encodingName, normalised, parameters, cutoffs, vocabularyCap, normalize, fingerprint, log10UnseenContextWeight, sections, structureChecked } = model;
    process.stdout.write(JSON.stringify({ filePath, version, fileBytes, order, vocabularySize, ngrams, values: encodingName, lookups: model.engine, normalised, parameters, cutoffs, vocabularyCap, normalize, fingerprint, log10UnseenContextWeight, sections, structureChecked, ...(quantisation === undefined ? {} : { heldout: quantisation }) }, null, 2) + '\n');
  },
};
