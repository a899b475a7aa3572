/**
 * Measures `nextTokens` (`quern next`: the most probable next tokens after a context) per query, as
 * a keyboard or an OCR decoder asks it: contexts of up to 4 words taken from held-out text (every
 * third position of each line), each asked once, optionally with the first letters of the word
 * that follows as a prefix. With --against REV, REV's src/ is extracted (scripts/lib/revision-tree.ts)
 * and its `nextTokens` runs on the same model file, in turn with this checkout's, round by round
 * (the order reversed every other round). Each side's answers must be the same (ids, orders, log10 p
 * within 1e-12), or the script fails. It prints the median, 90th and 99th percentile and the
 * largest time per query of each, from all rounds but the first, and the first round apart (there
 * the first query of a model ranks the vocabulary by unigram probability, and each long list of
 * children is ranked the first time it is read).
 *
 *   npm run bench:next -- --model FILE --heldout TEXT [--queries 2000] [--top 5] [--prefix-letters 0] [--rounds 3] [--against REV]
 */
import { readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { openModel } from '../src/pack/reader.ts';
import { contextState, nextTokens } from '../src/score/next-words.ts';
import { extractRevision } from './lib/revision-tree.ts';

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));

const { values: args } = parseArgs({
  options: {
    model: { type: 'string' },
    heldout: { type: 'string' },
    queries: { type: 'string', default: '2000' },
    top: { type: 'string', default: '5' },
    'prefix-letters': { type: 'string', default: '0' },
    rounds: { type: 'string', default: '3' },
    against: { type: 'string' },
  },
});
if (args.model === undefined || args.heldout === undefined) throw new Error('usage: bench-next.ts --model FILE --heldout TEXT [--queries N] [--top K] [--prefix-letters L] [--rounds R] [--against REV]');
const top = Number(args.top);
const prefixLetters = Number(args['prefix-letters']);
const rounds = Number(args.rounds);

type Next = typeof nextTokens;
type Context = typeof contextState;
interface Side {
  name: string;
  nextTokens: Next;
  contextState: Context;
  model: Awaited<ReturnType<typeof openModel>>;
}

const sides: Side[] = [{ name: 'this checkout', nextTokens, contextState, model: await openModel(args.model) }];
if (args.against !== undefined) {
  const { hash, tree } = extractRevision(REPO, args.against, ['src'], (h) => join(REPO, 'bench-out', `next-${h}`));
  const reader = (await import(join(tree, 'src/pack/reader.ts'))) as { openModel: typeof openModel };
  const next = (await import(join(tree, 'src/score/next-words.ts'))) as { nextTokens: Next; contextState: Context };
  sides.push({ name: hash, nextTokens: next.nextTokens, contextState: next.contextState, model: await reader.openModel(args.model) });
}

// Queries: the up to 4 words before every third position of each held-out line, and the prefix.
const queries: Array<{ context: string[]; prefix: string | undefined }> = [];
for (const line of readFileSync(args.heldout, 'utf8').split('\n')) {
  const words = line.split(/\s+/).filter((word) => word.length > 0);
  for (let i = 0; i < words.length && queries.length < Number(args.queries); i += 3) {
    const prefix = prefixLetters > 0 ? [...words[i]].slice(0, prefixLetters).join('') : undefined;
    queries.push({ context: words.slice(Math.max(0, i - 4), i), prefix });
  }
  if (queries.length >= Number(args.queries)) break;
}

const times: number[][] = sides.map(() => []);
const firstRound: number[][] = sides.map(() => []);
const answers: string[][] = sides.map(() => []);
for (let round = 0; round < rounds; round++) {
  const order = round % 2 === 0 ? sides.map((_, i) => i) : sides.map((_, i) => sides.length - 1 - i);
  for (const index of order) {
    const side = sides[index];
    for (const [q, query] of queries.entries()) {
      const state = side.contextState(side.model, query.context);
      const started = performance.now();
      const result = side.nextTokens(side.model as never, state as never, { top, prefix: query.prefix });
      const elapsed = performance.now() - started;
      if (round > 0) times[index].push(elapsed);
      else firstRound[index].push(elapsed);
      if (round === 0) answers[index][q] = JSON.stringify(result.map((t) => [t.id, t.order, Number(t.log10Prob.toFixed(12))]));
    }
  }
}
for (let index = 1; index < sides.length; index++) {
  for (let q = 0; q < queries.length; q++) {
    if (answers[index][q] !== answers[0][q]) throw new Error(`query ${q} (${JSON.stringify(queries[q])}): ${sides[index].name} answers ${answers[index][q]}, this checkout ${answers[0][q]}`);
  }
}
const at = (sorted: number[], p: number): number => sorted[Math.min(sorted.length - 1, Math.floor(p * sorted.length))];
console.log(`${args.model}: ${queries.length} queries (top ${top}${prefixLetters > 0 ? `, prefixes of ${prefixLetters} letters` : ''}), ${rounds - 1} timed rounds; load average ${readFileSync('/proc/loadavg', 'utf8').split(' ').slice(0, 3).join(' ')}`);
const medians: number[] = [];
for (const [index, side] of sides.entries()) {
  const sorted = [...times[index]].sort((a, b) => a - b);
  medians.push(at(sorted, 0.5));
  const ms = (value: number): string => `${value.toFixed(3)} ms`;
  const first = [...firstRound[index]].sort((a, b) => a - b);
  console.log(`  ${side.name.padEnd(14)} median ${ms(at(sorted, 0.5))}, p90 ${ms(at(sorted, 0.9))}, p99 ${ms(at(sorted, 0.99))}, max ${ms(sorted[sorted.length - 1])}; ` +
    `first round ${ms(first.reduce((sum, t) => sum + t, 0))} in all, median ${ms(at(first, 0.5))}, p90 ${ms(at(first, 0.9))}, max ${ms(first[first.length - 1])}`);
}
if (sides.length > 1) console.log(`answers identical; this checkout's median ×${(medians[0] / medians[1]).toFixed(3)} of ${sides[1].name}'s`);
