/**
 * `quern next`: the most probable next tokens after some words, by a model file — what a keyboard
 * would offer after the words typed so far (`--prefix`: the completions of the word being typed),
 * or a look at what a model expects in a context. Exact (src/score/next-words.ts).
 */
import { createReadStream } from 'node:fs';
import type { CommandModule } from 'yargs';
import { makeTokenizer } from '../corpus/tokenize.ts';
import type { NormalizeOptions } from '../corpus/types.ts';
import { QuernError } from '../errors.ts';
import { openModel, type PackedModel } from '../pack/reader.ts';
import { contextState, nextTokens } from '../score/next-words.ts';
import { resolveNormalize } from '../score/normalization.ts';
import { normalizeOptions } from './count.ts';
import { intInRange } from './options.ts';
import { writeOut } from './write-out.ts';

/** Most tokens `quern next` lists. */
const NEXT_TOP_MAX = 100_000;
/** The longest query line of --queries, in bytes: a context of a few words needs far less. */
const QUERY_LINE_BYTES_MAX = 1 << 16;

/** What every query of one run shares: the model, how text becomes tokens, and the options. */
interface Asking {
  model: PackedModel;
  tokenize: (text: string, into: string[]) => number;
  top: number;
  exclude: ReadonlySet<number> | undefined;
  sentenceStart: boolean;
}

/** The answer to one query: the context as the model reads it, the prefix, the best tokens. */
function answer(asking: Asking, context: string, prefixText: string | undefined, prefixName = 'the prefix'): { context: string[]; prefix: string | null; next: Array<{ word: string; log10Prob: number; probability: number; order: number }> } {
  const { model, tokenize, top, exclude, sentenceStart } = asking;
  const words: string[] = [];
  words.length = tokenize(context, words);
  let prefix: string | undefined;
  if (prefixText !== undefined && prefixText !== '') {
    const tokens: string[] = [];
    const count = tokenize(prefixText, tokens);
    if (count !== 1) throw new QuernError('config', `${prefixName} must be the start of one token; ${JSON.stringify(prefixText)} is ${count} tokens`);
    prefix = tokens[0];
  }
  const tokens = nextTokens(model, contextState(model, words, sentenceStart), { top, prefix, exclude });
  const history = [...(sentenceStart ? ['<s>'] : []), ...words.map((word) => (model.textWordId(word) < 0 ? '<unk>' : word))];
  return { context: history, prefix: prefix ?? null, next: tokens.map(({ word, log10Prob, order }) => ({ word, log10Prob, probability: 10 ** log10Prob, order })) };
}

/**
 * Answers a stream of queries, one per line ("words so far", or "words so far<TAB>prefix"), with one
 * JSON line each, written as soon as it is known (a keyboard or a decoder keeps the model open and
 * asks through a pipe). A line that cannot be answered (invalid UTF-8, too long, a prefix of two
 * tokens) gets {"line": n, "error": …} instead, and the stream goes on.
 */
async function answerQueries(asking: Asking, source: NodeJS.ReadableStream, write: (text: string) => Promise<void> | void): Promise<void> {
  const decoder = new TextDecoder('utf-8', { fatal: true });
  let carry = Buffer.alloc(0);
  let lineNumber = 0;
  const one = async (bytes: Buffer): Promise<void> => {
    lineNumber++;
    let record: object;
    try {
      if (bytes.length > QUERY_LINE_BYTES_MAX) throw new QuernError('input', `line longer than ${QUERY_LINE_BYTES_MAX} bytes`);
      let text: string;
      try {
        text = decoder.decode(bytes);
      } catch {
        throw new QuernError('input', 'invalid UTF-8');
      }
      if (text.endsWith('\r')) text = text.slice(0, -1);
      const tab = text.indexOf('\t');
      record = { line: lineNumber, ...answer(asking, tab < 0 ? text : text.slice(0, tab), tab < 0 ? undefined : text.slice(tab + 1)) };
    } catch (error) {
      if (!(error instanceof QuernError)) throw error;
      record = { line: lineNumber, error: error.message };
    }
    await write(JSON.stringify(record) + '\n');
  };
  for await (const chunk of source) {
    let block = Buffer.concat([carry, chunk as Buffer]);
    for (let newline = block.indexOf(0x0a); newline >= 0; newline = block.indexOf(0x0a)) {
      await one(block.subarray(0, newline));
      block = block.subarray(newline + 1);
    }
    // A line without its end yet: kept, up to the limit (then answered as too long, the rest dropped).
    carry = block.length > QUERY_LINE_BYTES_MAX + 1 ? block.subarray(0, QUERY_LINE_BYTES_MAX + 1) : Buffer.from(block);
  }
  if (carry.length > 0) await one(carry);
}

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
    .option('json', { type: 'boolean', default: false, describe: 'Print one JSON object' })
    .option('queries', { type: 'string', describe: 'Answer one query per line of this file (none, or -: standard input): "words so far", or "words so far<TAB>prefix"; one JSON line each, as soon as it is known' }), false)
    .example('$0 next model.qm "cast off the"', 'The 10 most probable words after "cast off the" at the start of a sentence')
    .example('$0 next model.qm "cast off the" --prefix ha --words-only', 'Completions of "ha…" there')
    .example('$0 next model.qm --queries --top 5', 'Keep the model open and answer the queries a program writes to standard input'),
  handler: async (argv) => {
    const top = intInRange(argv.top, '--top', 1, NEXT_TOP_MAX);
    let queries = argv.queries as string | undefined;
    // `--queries` alone, or `--queries -` (which yargs reads as a bare `-` beside an empty value):
    // standard input.
    if (queries === '' || queries === '-') {
      queries = '-';
      if (argv.context === '-') argv.context = '';
    }
    if (queries !== undefined && ((argv.context as string) !== '' || argv.prefix !== undefined)) {
      throw new QuernError('config', '--queries takes the contexts (and prefixes, after a tab) from its lines: give no context or --prefix beside it');
    }
    const model = await openModel(argv.model as string);
    const given = { lowercase: argv.lowercase as boolean | undefined, unicode: argv.unicode as NormalizeOptions['unicode'] | undefined, split: argv.split as NormalizeOptions['split'] | undefined };
    const { normalize } = resolveNormalize(model.normalize, given);
    const asking: Asking = {
      model, tokenize: makeTokenizer(normalize), top,
      exclude: argv['words-only'] ? new Set([model.eosId, model.unkId]) : undefined,
      sentenceStart: !(argv['mid-sentence'] as boolean),
    };
    const out = process.stdout;
    if (queries !== undefined) {
      const source = queries === '-' ? process.stdin : createReadStream(queries);
      try {
        await answerQueries(asking, source, (text) => writeOut(out, text));
      } catch (cause) {
        if (cause instanceof QuernError) throw cause;
        throw new QuernError('io', `cannot read ${queries === '-' ? 'standard input' : queries}: ${(cause as Error).message}`, { cause });
      }
      return;
    }
    const { context, prefix, next } = answer(asking, argv.context as string, argv.prefix as string | undefined, '--prefix');
    if (argv.json) {
      out.write(JSON.stringify({ context, prefix, next }, null, 2) + '\n');
      return;
    }
    out.write(`after ${context.length > 0 ? context.join(' ') : '(nothing)'}${prefix !== null ? `, starting with ${JSON.stringify(prefix)}` : ''}: log10 p, p, the order that answered\n`);
    for (const { word, log10Prob, order } of next) out.write(`${word}\t${log10Prob.toFixed(4)}\t${(10 ** log10Prob).toPrecision(4)}\t${order}\n`);
  },
};
