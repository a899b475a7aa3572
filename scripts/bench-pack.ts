/**
 * Measures `quern estimate`'s last step, packing a job's finished estimate into a model file
 * (src/pack/writer.ts reading src/estimate/job-model-source.ts's merge of the partitions' result
 * files), or `quern pack` of an ARPA file (src/pack/arpa.ts), against another revision's in the
 * same run.
 *
 *   npm run bench:pack -- --job DIR [--against REV] [--repeat N] [--quant 8|16] [--threads on|off]
 *   npm run bench:pack -- --arpa FILE [--memory SIZE] [--against REV] [--repeat N] [--quant 8|16]
 *
 * --job      a counted job whose estimate is finished (`quern estimate DIR`; e.g. the order-5 job
 *            of the 200 MB corpus that `npm run bench:estimate` leaves in bench-out/estimate-200MB-o5,
 *            estimated once with `node bin/quern.js estimate DIR --fallback`)
 * --arpa     an ARPA file instead (e.g. `quern export` of such a model; its sections shuffled to
 *            measure the sort), packed as `quern pack` does
 * --memory   with --arpa: `quern pack --memory`, the sort's budget (default its default); revisions
 *            that read the whole ARPA file into memory ignore it
 * --against  a git revision: its src/ is extracted to a scratch folder (scripts/lib/revision-tree.ts)
 *            and its writer and model source run beside this checkout's, alternating
 * --repeat   runs of each (default 2)
 * --quant    pack with 8- or 16-bit codes instead of float32
 * --threads  on (default, as `quern estimate` packs): each order is merged in a thread of its own
 *            (revisions without that option pack on one thread whatever this says); off: one thread
 *
 * Each run is a child process (scripts/lib/pack-once.ts) under GNU time (scripts/lib/rss.ts): the
 * pack's own wall and CPU time, and the process's peak RSS. With --against, every file written is
 * compared with the first one byte for byte (the writers must agree) and the script fails when one
 * differs. The machine is shared and noisy: compare the ratios of one run, not seconds across runs.
 * Results go to stdout and to bench-out/bench-pack-<timestamp>.json.
 */
import { existsSync, mkdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import bytesIec from 'bytes-iec';
import { fileDigest } from './lib/file-digest.ts';
import { hugePagesEnv } from './lib/quern-env.ts';
import { extractRevision } from './lib/revision-tree.ts';
import { GNU_TIME_PATH, measureCommand } from './lib/rss.ts';

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const BENCH_OUT = join(REPO, 'bench-out');
const ONCE = join(REPO, 'scripts/lib/pack-once.ts');

function fail(message: string): never {
  process.stderr.write(`bench-pack: ${message}\n`);
  process.exit(2);
}

const { values } = parseArgs({
  options: {
    job: { type: 'string' },
    arpa: { type: 'string' },
    memory: { type: 'string' },
    against: { type: 'string' },
    repeat: { type: 'string', default: '2' },
    quant: { type: 'string' },
    threads: { type: 'string', default: 'on' },
  },
});
if ((values.job === undefined) === (values.arpa === undefined)) fail('one of --job DIR (a job whose estimate is finished) or --arpa FILE is required');
const mode = values.arpa === undefined ? 'job' : 'arpa';
const job = resolve((values.job ?? values.arpa) as string);
const repeat = Number(values.repeat);
if (!(Number.isInteger(repeat) && repeat >= 1)) fail(`--repeat must be an integer ≥ 1 (got ${values.repeat})`);
if (values.quant !== undefined && values.quant !== '8' && values.quant !== '16') fail(`--quant must be 8 or 16 (got ${values.quant})`);
if (mode === 'job') {
  const manifest = JSON.parse(readFileSync(join(job, 'job.json'), 'utf8')) as { stages: { estimate?: { status?: string } } };
  if (manifest.stages.estimate?.status !== 'done') fail(`${job} holds no finished estimate: run node bin/quern.js estimate ${job} first`);
} else if (!existsSync(job)) fail(`no ARPA file ${job}`);

interface Row { what: string; wallMs: number; cpuMs: number; rssBytesMax: number; bytes: number; ngrams: number; loadAverage1m: number }

const work = join(BENCH_OUT, 'work', `pack-${process.pid}`);
mkdirSync(work, { recursive: true });
const against = values.against === undefined ? null : extractRevision(REPO, values.against, ['src', 'package.json', 'tsconfig.json'], (h) => join(work, `tree-${h}`));
const trees: Array<{ what: string; tree: string }> = [{ what: 'this checkout', tree: REPO }, ...(against === null ? [] : [{ what: values.against as string, tree: against.tree }])];

const rows: Row[] = [];
let reference: string | null = null;
let differ = false;
try {
  for (let run = 0; run < repeat; run++) {
    for (const { what, tree } of run % 2 === 0 ? trees : [...trees].reverse()) {
      const file = join(work, `model-${rows.length}.qm`);
      const loadAverage1m = os.loadavg()[0];
      const measured = await measureCommand(GNU_TIME_PATH, ['-f', '%U %S', process.execPath, '--import', 'tsx', ONCE, tree, job, file, values.quant ?? '-', values.threads as string, mode, values.memory === undefined ? '-' : String(bytesIec.parse(values.memory))], { cwd: REPO, stdout: 'pipe', stderr: 'pipe', env: hugePagesEnv('on') });
      if (measured.exitCode !== 0) fail(`${what} failed (${measured.exitCode ?? measured.signal}): ${measured.stderr.trim()}`);
      const result = JSON.parse(measured.stdout.trim().split('\n').pop() as string) as { elapsedMs: number; cpuMs: number; bytes: number; ngrams: number[] };
      const row: Row = { what, wallMs: result.elapsedMs, cpuMs: result.cpuMs, rssBytesMax: measured.rssBytesMax, bytes: result.bytes, ngrams: result.ngrams.reduce((a, b) => a + b, 0), loadAverage1m };
      rows.push(row);
      process.stderr.write(`${what.padEnd(16)} ${(row.wallMs / 1000).toFixed(1).padStart(7)} s  CPU ${(row.cpuMs / 1000).toFixed(1).padStart(7)} s  ${(row.ngrams / row.wallMs / 1000).toFixed(2)} M n-grams/s  peak RSS ${(row.rssBytesMax / 2 ** 20).toFixed(0)} MiB  load ${loadAverage1m.toFixed(1)}\n`);
      if (reference === null) reference = file;
      else {
        if ((await fileDigest(reference)) !== (await fileDigest(file))) {
          differ = true;
          process.stderr.write(`${what}: its file DIFFERS from the first run's\n`);
        }
        rmSync(file, { force: true });
      }
    }
  }
} finally {
  rmSync(work, { recursive: true, force: true });
}

const median = (xs: number[]): number => {
  const sorted = [...xs].sort((a, b) => a - b);
  const middle = sorted.length >> 1;
  return sorted.length % 2 === 1 ? sorted[middle] : (sorted[middle - 1] + sorted[middle]) / 2;
};
const lines = [`${mode === 'job' ? 'job' : 'ARPA file'}: ${job}; ${rows[0].ngrams} n-grams, ${rows[0].bytes} bytes (${(rows[0].bytes / rows[0].ngrams).toFixed(2)} per n-gram)${values.quant === undefined ? '' : `, ${values.quant}-bit codes`}; ${os.cpus().length} CPUs`];
lines.push(['writer', 'wall s', 'CPU s', 'M n-grams/s', 'peak RSS MiB', 'load'].join('\t'));
for (const r of rows) lines.push([r.what, (r.wallMs / 1000).toFixed(1), (r.cpuMs / 1000).toFixed(1), (r.ngrams / r.wallMs / 1000).toFixed(2), (r.rssBytesMax / 2 ** 20).toFixed(0), r.loadAverage1m.toFixed(1)].join('\t'));
if (against !== null) {
  const mine = rows.filter((r) => r.what === 'this checkout');
  const theirs = rows.filter((r) => r.what !== 'this checkout');
  const ratio = (key: 'wallMs' | 'cpuMs'): string => (median(mine.map((r) => r[key])) / median(theirs.map((r) => r[key]))).toFixed(2);
  lines.push(`this checkout: ${ratio('wallMs')}× the wall time, ${ratio('cpuMs')}× the CPU time of ${values.against} (medians of ${mine.length} runs each, alternating); files ${differ ? 'DIFFER' : 'byte-identical'}`);
}
process.stdout.write(lines.join('\n') + '\n');
mkdirSync(BENCH_OUT, { recursive: true });
const out = join(BENCH_OUT, `bench-pack-${new Date().toISOString().replace(/[:.]/g, '-')}.json`);
writeFileSync(out, JSON.stringify({ benchmark: 'scripts/bench-pack.ts', options: values, job, rows, differ }, null, 2) + '\n');
process.stderr.write(`results in ${out}\n`);
if (differ) process.exit(1);
if (!existsSync(out)) fail('no results written');
