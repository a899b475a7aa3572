/**
 * Measures `quern export` (a model file → the ARPA text format) against another revision's, in one
 * run, alternately: wall time and peak RSS of each, and the two outputs compared byte for byte.
 *
 *   npm run bench:export -- --model FILE --against REV [--repeat N]
 *
 * Each run is `bin/quern.js export FILE --out OUT` of this checkout or of REV's tree (its src/ and
 * bin/ extracted by scripts/lib/revision-tree.ts) under GNU time (scripts/lib/rss.ts). The outputs
 * are written to bench-out/work/ and deleted after the comparison. The script fails when they
 * differ. The machine is shared and noisy: compare the ratios of one run.
 */
import { mkdirSync, rmSync, statSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { fileDigest } from './lib/file-digest.ts';
import { ensureCompiled, hugePagesEnv } from './lib/quern-env.ts';
import { extractRevision } from './lib/revision-tree.ts';
import { GNU_TIME_PATH, measureCommand } from './lib/rss.ts';

// quern runs compiled, as after npm ci (a stale dist/ is rebuilt first).
ensureCompiled();

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const BENCH_OUT = join(REPO, 'bench-out');

function fail(message: string): never {
  process.stderr.write(`bench-export: ${message}\n`);
  process.exit(2);
}

const { values } = parseArgs({ options: { model: { type: 'string' }, against: { type: 'string' }, repeat: { type: 'string', default: '1' } } });
if (values.model === undefined || values.against === undefined) fail('--model FILE and --against REV are required');
const model = resolve(values.model);
const repeat = Number(values.repeat);
if (!(Number.isInteger(repeat) && repeat >= 1)) fail(`--repeat must be an integer ≥ 1 (got ${values.repeat})`);

const work = join(BENCH_OUT, 'work', `export-${process.pid}`);
mkdirSync(work, { recursive: true });
const against = extractRevision(REPO, values.against, ['src', 'bin', 'package.json', 'tsconfig.json'], (h) => join(work, `tree-${h}`));
const trees = [{ what: 'this checkout', tree: REPO }, { what: values.against, tree: against.tree }];

interface Row { what: string; wallMs: number; rssBytesMax: number; outBytes: number; loadAverage1m: number }
const rows: Row[] = [];
const digests = new Set<string>();
try {
  for (let run = 0; run < repeat; run++) {
    for (const { what, tree } of run % 2 === 0 ? trees : [...trees].reverse()) {
      const out = join(work, 'model.arpa');
      const loadAverage1m = os.loadavg()[0];
      const measured = await measureCommand(GNU_TIME_PATH, [process.execPath, join(tree, 'bin/quern.js'), 'export', model, '--out', out], { cwd: tree, stdout: 'pipe', stderr: 'pipe', env: hugePagesEnv('on') });
      if (measured.exitCode !== 0) fail(`${what} failed (${measured.exitCode ?? measured.signal}): ${measured.stderr.trim()}`);
      const row = { what, wallMs: measured.elapsedMs, rssBytesMax: measured.rssBytesMax, outBytes: statSync(out).size, loadAverage1m };
      rows.push(row);
      digests.add(await fileDigest(out));
      rmSync(out, { force: true });
      process.stderr.write(`${what.padEnd(16)} ${(row.wallMs / 1000).toFixed(1).padStart(7)} s  peak RSS ${(row.rssBytesMax / 2 ** 20).toFixed(0)} MiB  ${row.outBytes} bytes  load ${loadAverage1m.toFixed(1)}\n`);
    }
  }
} finally {
  rmSync(work, { recursive: true, force: true });
}
const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor((xs.length - 1) / 2)];
const mine = rows.filter((r) => r.what === 'this checkout');
const theirs = rows.filter((r) => r.what !== 'this checkout');
const line = `${model}: this checkout ${(median(mine.map((r) => r.wallMs)) / median(theirs.map((r) => r.wallMs))).toFixed(2)}× the wall time, ` +
  `${(median(mine.map((r) => r.rssBytesMax)) / median(theirs.map((r) => r.rssBytesMax))).toFixed(2)}× the peak RSS of ${values.against} (medians of ${mine.length} runs each); outputs ${digests.size === 1 ? 'byte-identical' : 'DIFFER'}`;
process.stdout.write(line + '\n');
mkdirSync(BENCH_OUT, { recursive: true });
writeFileSync(join(BENCH_OUT, `bench-export-${new Date().toISOString().replace(/[:.]/g, '-')}.json`), JSON.stringify({ benchmark: 'scripts/bench-export.ts', options: values, rows, identical: digests.size === 1 }, null, 2) + '\n');
if (digests.size !== 1) process.exit(1);
