/**
 * `quern score`: perplexity of a packed model on inputs read like `quern count` reads them (plain,
 * gzip, JSON Lines), per file and in total; with --per-line, one JSON record per line (or per
 * JSON Lines document) for filtering training data by perplexity.
 */
import type { CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { discoverInputs } from '../corpus/discover.ts';
import { planChunks } from '../corpus/plan.ts';
import { readChunk } from '../corpus/read.ts';
import { makeTokenizer } from '../corpus/tokenize.ts';
import type { NormalizeOptions } from '../corpus/types.ts';
import { openModel, type PackedModel } from '../pack/reader.ts';
import { corpusOptions } from './count.ts';
import { describeNormalize, resolveNormalize } from '../score/normalization.ts';
import { withPerplexities, type PerplexityResult } from '../score/perplexity.ts';
import { BatchScorer } from '../score/batch.ts';

/** One file's (or the total's) sums and perplexities. */
interface Totals extends PerplexityResult {
  file: string;
}

function totals(file: string): Totals {
  return { file, sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0, perplexity: NaN, perplexityWithUnk: NaN };
}

/** Scores every sentence of the inputs; `onLine` receives per-sentence records when asked. */
export async function scoreInputs(
  model: PackedModel, specs: string[], normalize: NormalizeOptions, textField: string | undefined, skipBad: boolean,
  onLine?: (record: object) => void,
): Promise<{ files: Totals[]; total: Totals }> {
  if (!model.normalised) throw new QuernError('config', `perplexity needs a normalised model; this ${model.parameters.method} model gives scores, not probabilities`);
  const inputs = await discoverInputs(specs);
  if (inputs.some((f) => f.format === 'jsonl') && textField === undefined) throw new QuernError('config', 'JSON Lines input: say where the text is with --text-field');
  const tokenize = makeTokenizer(normalize);
  const tokens: string[] = [];
  const total = totals('total');
  const files: Totals[] = [];
  for (const chunk of await planChunks(inputs, Number.MAX_SAFE_INTEGER)) {
    const file = inputs[chunk.fileIndex];
    const t = totals(file.path);
    let line = 0;
    // Sentences are scored in groups of up to SCORE_BATCH_TOKENS tokens, many at once (a model
    // file of SCORE_BATCH_MODEL_BYTES_MIN or more; src/score/batch.ts), and reported in order.
    const scorer = new BatchScorer(model, (score) => {
      line++;
      t.sentences++;
      t.tokens += score.tokens.length;
      t.oov += score.oov;
      t.log10Prob += score.log10Prob;
      t.log10ProbWithUnk += score.log10ProbWithUnk;
      onLine?.({
        file: file.path, sentence: line, tokens: score.tokens.length, oov: score.oov, log10Prob: score.log10Prob,
        perplexity: 10 ** (-score.log10Prob / Math.max(1, score.tokens.length - score.oov)),
        perplexityWithUnk: 10 ** (-score.log10ProbWithUnk / score.tokens.length),
      });
    });
    await readChunk(file, chunk, { format: file.format, textField: textField?.split('.'), skipBad }, (sentence) => {
      const n = tokenize(sentence, tokens);
      scorer.add(tokens.slice(0, n));
    });
    scorer.flush();
    for (const k of ['sentences', 'tokens', 'oov', 'log10Prob', 'log10ProbWithUnk'] as const) total[k] += t[k];
    files.push(withPerplexities(t));
  }
  return { files, total: withPerplexities(total) };
}

export const scoreCommand: CommandModule = {
  command: 'score <model> <inputs..>',
  describe: 'Perplexity of a model file on text (plain, gzip, JSON Lines), per file and in total',
  builder: (yargs) => corpusOptions(yargs
    .positional('model', { type: 'string', describe: 'A model file written by quern estimate, build or pack' })
    .positional('inputs', { type: 'string', array: true, describe: 'Files, directories or glob patterns' })
    .option('per-line', { type: 'boolean', default: false, describe: 'Print one JSON record per sentence (per line, or per line of a JSON Lines text field)' })
    .option('json', { type: 'boolean', default: false, describe: 'Print the totals as one JSON object' }), false)
    .example('$0 score job/model.qm heldout/', 'Perplexity on held-out text, normalised as the model file records it'),
  handler: async (argv) => {
    const model = await openModel(argv.model as string);
    const given = { lowercase: argv.lowercase as boolean | undefined, unicode: argv.unicode as NormalizeOptions['unicode'] | undefined, split: argv.split as NormalizeOptions['split'] | undefined };
    const { normalize, source } = resolveNormalize(model.normalize, given);
    const out = process.stdout;
    const { files, total } = await scoreInputs(model, argv.inputs as string[], normalize, argv['text-field'] as string | undefined, Boolean(argv['skip-bad']),
      argv['per-line'] ? (record) => out.write(JSON.stringify(record) + '\n') : undefined);
    if (argv['per-line']) return;
    if (argv.json) {
      out.write(JSON.stringify({ normalize, normalizeSource: source, files, total }, null, 2) + '\n');
      return;
    }
    out.write(`normalisation: ${describeNormalize(normalize)} (${source === 'model' ? 'as the model file records it' : 'the model file records none: as given'})\n`);
    for (const t of [...files, total]) {
      out.write(`${t.file}\n  ${t.sentences} sentences, ${t.tokens} tokens (${t.oov} OOV), log10 p ${t.log10Prob.toFixed(2)}, ` +
        `perplexity ${t.perplexity.toFixed(2)} without OOVs, ${t.perplexityWithUnk.toFixed(2)} with OOVs as <unk>\n`);
    }
  },
};
