/**
 * Measures `quern score` (perplexity of a model file on text) with different numbers of worker
 * threads, and optionally beside another revision's `quern score`, in one run, configurations in
 * turn (the order reversed every other round): wall time and peak RSS of each, and their sums
 * compared.
 *
 *   npm run bench:score -- --model FILE --text FILE [--text FILE …] [--workers 1,2] [--against REV [--against-args='--workers 1']] [--repeat N]
 *
 * Each run is `bin/quern.js score MODEL TEXT… --json --quiet --workers W` under GNU time
 * (scripts/lib/rss.ts), with the program's environment (huge pages, scripts/lib/quern-env.ts).
 * REV's tree (its src/ and bin/, scripts/lib/revision-tree.ts) runs `… --json` and --against-args
 * (a revision before 4bb0414 has neither --workers nor --quiet; from it on, --workers defaults to the
 * cores).
 * The totals of this checkout's runs must be identical whatever the number of workers, and REV's
 * equal to them in tokens, sentences and OOVs and within 1e-9 in Σ log10 p (its sums may add the
 * sentences in another grouping); else the script fails. The ratios are against the first
 * configuration (REV's, when given; else the first worker count). The machine is shared and
 * noisy: compare the ratios of one run.
 */
import { mkdirSync, rmSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { ensureCompiled, hugePagesEnv } from './lib/quern-env.ts';
import { extractRevision } from './lib/revision-tree.ts';
import { GNU_TIME_PATH, measureCommand } from './lib/rss.ts';

// quern runs compiled, as after npm ci (a stale dist/ is rebuilt first).
ensureCompiled();

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const BENCH_OUT = join(REPO, 'bench-out');

function fail(message: string): never {
  process.stderr.write(`bench-score: ${message}\n`);
  process.exit(2);
}

const { values } = parseArgs({
  options: {
    model: { type: 'string' },
    text: { type: 'string', multiple: true },
    workers: { type: 'string', default: `1,${os.availableParallelism()}` },
    against: { type: 'string' },
    'against-args': { type: 'string', default: '' },
    repeat: { type: 'string', default: '1' },
  },
});
if (values.model === undefined || values.text === undefined) fail('--model FILE and --text FILE are required');
const model = resolve(values.model);
const texts = values.text.map((file) => resolve(file));
const repeat = Number(values.repeat);
if (!(Number.isInteger(repeat) && repeat >= 1)) fail(`--repeat must be an integer ≥ 1 (got ${values.repeat})`);
const workerCounts = values.workers.split(',').map(Number);
if (workerCounts.some((count) => !(Number.isInteger(count) && count >= 1))) fail(`--workers must list integers ≥ 1 (got ${values.workers})`);

/** What a configuration adds to `score MODEL TEXT… --json`. */
interface Configuration { what: string; tree: string; extra: string[] }
const work = join(BENCH_OUT, 'work', `score-${process.pid}`);
const configurations: Configuration[] = [];
if (values.against !== undefined) {
  const against = extractRevision(REPO, values.against, ['src', 'bin', 'package.json', 'tsconfig.json'], (hash) => join(work, `tree-${hash}`));
  const extra = values['against-args'].split(' ').filter((arg) => arg !== '');
  configurations.push({ what: `${values.against} (${against.hash})${extra.length > 0 ? ` ${extra.join(' ')}` : ''}`, tree: against.tree, extra });
}
for (const count of workerCounts) configurations.push({ what: `--workers ${count}`, tree: REPO, extra: ['--quiet', '--workers', String(count)] });

interface Totals { sentences: number; tokens: number; oov: number; log10Prob: number; log10ProbWithUnk: number }
interface Row { what: string; wallMs: number; rssBytesMax: number; tokens: number; loadAverage1m: number }
const rows: Row[] = [];
const totalsOf = new Map<string, string>();
let reference: Totals | undefined;
try {
  for (let round = 0; round < repeat; round++) {
    for (const configuration of round % 2 === 0 ? configurations : [...configurations].reverse()) {
      const { what, tree, extra } = configuration;
      const loadAverage1m = os.loadavg()[0];
      const measured = await measureCommand(GNU_TIME_PATH, [process.execPath, join(tree, 'bin/quern.js'), 'score', model, ...texts, '--json', ...extra], { cwd: tree, stdout: 'pipe', stderr: 'pipe', env: hugePagesEnv('on') });
      if (measured.exitCode !== 0) fail(`${what} failed (${measured.exitCode ?? measured.signal}): ${measured.stderr.trim()}`);
      const { total } = JSON.parse(measured.stdout) as { total: Totals };
      const kept = JSON.stringify([total.sentences, total.tokens, total.oov, total.log10Prob, total.log10ProbWithUnk]);
      if (tree === REPO) {
        const before = totalsOf.get('this checkout');
        if (before !== undefined && before !== kept) fail(`${what}: totals ${kept} differ from the other worker counts' ${before}`);
        totalsOf.set('this checkout', kept);
      }
      if (reference === undefined) reference = total;
      else {
        const same = total.sentences === reference.sentences && total.tokens === reference.tokens && total.oov === reference.oov &&
          Math.abs(total.log10Prob - reference.log10Prob) <= 1e-9 * Math.abs(reference.log10Prob);
        if (!same) fail(`${what}: totals ${kept} differ from ${JSON.stringify(reference)}`);
      }
      const row = { what, wallMs: measured.elapsedMs, rssBytesMax: measured.rssBytesMax, tokens: total.tokens, loadAverage1m };
      rows.push(row);
      process.stderr.write(`${what.padEnd(24)} ${(row.wallMs / 1000).toFixed(1).padStart(7)} s  ${(row.tokens / (row.wallMs / 1000) / 1e3).toFixed(0).padStart(6)} k tokens/s  peak RSS ${(row.rssBytesMax / 2 ** 20).toFixed(0)} MiB  load ${loadAverage1m.toFixed(1)}\n`);
    }
  }
} finally {
  rmSync(work, { recursive: true, force: true });
}

const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor((xs.length - 1) / 2)];
const base = configurations[0].what;
const baseWall = median(rows.filter((r) => r.what === base).map((r) => r.wallMs));
const baseRss = median(rows.filter((r) => r.what === base).map((r) => r.rssBytesMax));
process.stdout.write(`${model} on ${texts.length} file(s), ${rows[0].tokens.toLocaleString('en-US')} tokens, medians of ${repeat} run(s) each:\n`);
for (const { what } of configurations) {
  const mine = rows.filter((r) => r.what === what);
  const wall = median(mine.map((r) => r.wallMs));
  const rss = median(mine.map((r) => r.rssBytesMax));
  process.stdout.write(`  ${what.padEnd(24)} ${(wall / 1000).toFixed(1).padStart(7)} s (${(wall / baseWall).toFixed(2)}× ${base}'s time)  peak RSS ${(rss / 2 ** 20).toFixed(0)} MiB (${(rss / baseRss).toFixed(2)}×)\n`);
}
process.stdout.write(`totals the same in every configuration\n`);
mkdirSync(BENCH_OUT, { recursive: true });
writeFileSync(join(BENCH_OUT, `bench-score-${new Date().toISOString().replace(/[:.]/g, '-')}.json`), JSON.stringify({ benchmark: 'scripts/bench-score.ts', options: values, rows }, null, 2) + '\n');
