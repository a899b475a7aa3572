/**
 * `quern next`: the most probable next tokens after some words, by a model file — what a keyboard
 * would offer after the words typed so far (`--prefix`: the completions of the word being typed),
 * or a look at what a model expects in a context. Exact (src/score/next-words.ts).
 */
import type { CommandModule } from 'yargs';
import { makeTokenizer } from '../corpus/tokenize.ts';
import type { NormalizeOptions } from '../corpus/types.ts';
import { QuernError } from '../errors.ts';
import { openModel } from '../pack/reader.ts';
import { contextState, nextTokens } from '../score/next-words.ts';
import { resolveNormalize } from '../score/normalization.ts';
import { normalizeOptions } from './count.ts';
import { intInRange } from './options.ts';

/** Most tokens `quern next` lists. */
const NEXT_TOP_MAX = 100_000;

export const nextCommand: CommandModule = {
  command: 'next <model> [context]',
  describe: 'The most probable next tokens after some words, by a model file',
  builder: (yargs) => normalizeOptions(yargs
    .positional('model', { type: 'string', describe: 'A model file written by quern estimate, build or pack' })
    .positional('context', { type: 'string', default: '', describe: 'The words so far, as one argument (tokenised as the model\'s text was); none: the start of a sentence' })
    .option('top', { type: 'number', default: 10, describe: 'How many tokens to list' })
    .option('prefix', { type: 'string', describe: 'Only tokens that start with this text (the word being typed)' })
    .option('words-only', { type: 'boolean', default: false, describe: 'Leave out </s> (the end of the sentence) and <unk>' })
    .option('mid-sentence', { type: 'boolean', default: false, describe: 'The context is not the start of a sentence: no <s> before it' })
    .option('json', { type: 'boolean', default: false, describe: 'Print one JSON object' }), false)
    .example('$0 next model.qm "cast off the"', 'The 10 most probable words after "cast off the" at the start of a sentence')
    .example('$0 next model.qm "cast off the" --prefix ha --words-only', 'Completions of "ha…" there'),
  handler: async (argv) => {
    const top = intInRange(argv.top, '--top', 1, NEXT_TOP_MAX);
    const model = await openModel(argv.model as string);
    const given = { lowercase: argv.lowercase as boolean | undefined, unicode: argv.unicode as NormalizeOptions['unicode'] | undefined, split: argv.split as NormalizeOptions['split'] | undefined };
    const { normalize } = resolveNormalize(model.normalize, given);
    const tokenize = makeTokenizer(normalize);
    const words: string[] = [];
    words.length = tokenize(argv.context as string, words);
    let prefix: string | undefined;
    if (argv.prefix !== undefined && argv.prefix !== '') {
      const tokens: string[] = [];
      const count = tokenize(argv.prefix as string, tokens);
      if (count !== 1) throw new QuernError('config', `--prefix must be the start of one token; ${JSON.stringify(argv.prefix)} is ${count} tokens`);
      prefix = tokens[0];
    }
    const exclude = argv['words-only'] ? new Set([model.eosId, model.unkId]) : undefined;
    const sentenceStart = !(argv['mid-sentence'] as boolean);
    const state = contextState(model, words, sentenceStart);
    const tokens = nextTokens(model, state, { top, prefix, exclude });
    const history = [...(sentenceStart ? ['<s>'] : []), ...words.map((word) => (model.textWordId(word) < 0 ? '<unk>' : word))];
    const out = process.stdout;
    if (argv.json) {
      out.write(JSON.stringify({ context: history, prefix: prefix ?? null, next: tokens.map(({ word, log10Prob, order }) => ({ word, log10Prob, probability: 10 ** log10Prob, order })) }, null, 2) + '\n');
      return;
    }
    out.write(`after ${history.length > 0 ? history.join(' ') : '(nothing)'}${prefix !== undefined ? `, starting with ${JSON.stringify(prefix)}` : ''}: log10 p, p, the order that answered\n`);
    for (const { word, log10Prob, order } of tokens) out.write(`${word}\t${log10Prob.toFixed(4)}\t${(10 ** log10Prob).toPrecision(4)}\t${order}\n`);
  },
};
