/** `quern ngrams`: print `ngram<TAB>count` lines of one order of a counted job. */
import type { CommandModule } from 'yargs';
import { listNgrams } from '../count/listing.ts';
import { intInRange } from './options.ts';

export const ngramsCommand: CommandModule = {
  command: 'ngrams <job>',
  describe: 'Print the n-grams of one order with their counts (ngram<TAB>count)',
  builder: (yargs) => yargs
    .positional('job', { type: 'string', describe: 'Job directory of a finished count' })
    .option('order', { type: 'number', default: 1, describe: 'Which order to list' })
    .option('limit', { type: 'number', describe: 'Print at most this many lines' })
    .option('prefix', { type: 'string', describe: 'Only n-grams starting with these words (space-separated, as normalised at count time)' })
    .option('continuation', { type: 'boolean', default: false, describe: 'Print continuation counts N1+(• x) — how many distinct words precede x — instead of counts' })
    .option('by-count', { type: 'boolean', default: false, describe: 'Most frequent first (ties in the default order); default order: by word ids, which rank words by frequency' })
    .example('$0 ngrams job --order 3 --by-count --limit 20', 'The 20 most frequent trigrams')
    .example('$0 ngrams job --order 3 --prefix "cast off"', 'Every trigram starting with "cast off"'),
  handler: async (argv) => {
    const limit = argv.limit === undefined ? undefined : intInRange(argv.limit, '--limit', 0, Number.MAX_SAFE_INTEGER);
    const out = process.stdout;
    let buffer = '';
    for await (const { ngram, count } of listNgrams(argv.job as string, { order: Number(argv.order), limit, byCount: Boolean(argv['by-count']), prefix: typeof argv.prefix === 'string' ? argv.prefix.split(' ').filter(Boolean) : undefined, continuation: Boolean(argv.continuation) })) {
      buffer += `${ngram}\t${count}\n`;
      if (buffer.length > 1 << 16) {
        if (!out.write(buffer)) await new Promise((resolve) => out.once('drain', resolve));
        buffer = '';
      }
    }
    out.write(buffer);
  },
};
