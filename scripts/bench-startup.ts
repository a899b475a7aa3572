/**
 * What the build (scripts/build.mjs: src/ compiled to dist/) saves at start-up: `bin/quern.js`
 * running dist/ beside the same launcher running the sources through tsx (QUERN_FROM_SOURCE=1), on
 * the same commands, alternately in one run (which goes first changes each round), so that the
 * ratio holds on a machine whose speed moves.
 *
 *   npm run bench:startup [-- --rounds 9 --workers 2] [--corpus DIR --order 5]
 *
 * Commands (the bundled sample data; a model of it built once, before the rounds):
 *   help    quern --help                                   the CLI and yargs, no work
 *   info    quern info MODEL                               opening a small model file
 *   count   quern count SHARD --order 3 --workers K        a tiny job: K worker threads start
 *   score   quern score MODEL HELDOUT --workers K          score workers start and open the model
 *   build   quern build DIR --order N --workers K          with --corpus DIR only: the whole job on a
 *                                                          corpus (e.g. bench:count's 20 MB one), whose
 *                                                          estimate and pack start threads of their own
 *
 * Prints the median and least wall time (GNU time, 10 ms resolution) and the median CPU time (user +
 * system, every thread) of each, and the ratios of the medians (compiled / sources); then what the
 * launcher's stamp of src/ (bin/source-stamp.mjs) takes, the first time in a process and after. Exits with
 * status 1 when the two give different output for a command. A stale dist/ is rebuilt first.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { parseArgs } from 'node:util';
import { ensureCompiled } from './lib/quern-env.ts';
import { measureCommand, type Measurement } from './lib/rss.ts';
import { median, renderTable } from './lib/table.ts';

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const BIN = join(REPO, 'bin/quern.js');
const MODES = ['compiled', 'sources'] as const;
type Mode = (typeof MODES)[number];

const { values } = parseArgs({
  options: { rounds: { type: 'string', default: '9' }, workers: { type: 'string', default: '2' }, corpus: { type: 'string' }, order: { type: 'string', default: '5' } },
});
const rounds = Number(values.rounds);
const workers = Number(values.workers);
if (!Number.isInteger(rounds) || rounds < 1) throw new Error(`--rounds must be a positive integer, got ${values.rounds}`);
if (!Number.isInteger(workers) || workers < 1) throw new Error(`--workers must be a positive integer, got ${values.workers}`);

ensureCompiled();

const work = mkdtempSync(join(tmpdir(), 'quern-bench-startup-'));
const model = join(work, 'model.qm');
const shard = join(REPO, 'sample-data/logbook/harbour-2026-a.txt');
const heldout = join(REPO, 'sample-data/heldout/harbour-heldout.txt');
const made = spawnSync(process.execPath, [BIN, 'build', shard, '--order', '3', '--job', join(work, 'model-job'), '--out', model, '--quiet'], { encoding: 'utf8' });
if (made.status !== 0) throw new Error(`building the model failed: ${made.stderr}`);

interface Command {
  name: string;
  /** Arguments; `job` is a fresh job directory for this run. */
  args: (job: string) => string[];
  /** The part of the output both modes must give alike (timings and the job's path removed). */
  output: (stdout: string) => string;
}

const withoutTimes = (text: string): string =>
  text.replace(/^job .*$/m, 'job J').replace(/[0-9.]+ ?(ms|s)\b/g, 'T').replace(/[0-9.]+[kKM]? tokens\/s/g, 'R');
const COMMANDS: Command[] = [
  { name: 'help', args: () => ['--help'], output: (s) => s },
  { name: 'info', args: () => ['info', model], output: (s) => s },
  { name: 'count', args: (job) => ['count', shard, '--job', job, '--order', '3', '--workers', String(workers), '--quiet'], output: withoutTimes },
  { name: 'score', args: () => ['score', model, heldout, '--workers', String(workers), '--quiet'], output: (s) => s },
];
if (values.corpus !== undefined) {
  const corpus = resolve(values.corpus);
  COMMANDS.push({
    name: 'build',
    args: (job) => ['build', corpus, '--order', values.order!, '--workers', String(workers), '--job', job, '--out', join(job, 'model.qm'), '--quiet'],
    output: (s) => s.replace(/^.*job.*$/gm, 'J').replace(/[0-9.]+ ?(ms|s)\b/g, 'T'),
  });
}

const times = new Map<string, Measurement[]>();
const outputs = new Map<string, string>();
let runs = 0;
for (let round = 0; round < rounds; round++) {
  const order: readonly Mode[] = round % 2 === 0 ? MODES : [...MODES].reverse();
  for (const command of COMMANDS) {
    for (const mode of order) {
      const job = join(work, `job-${runs++}`);
      const env = { ...process.env, QUERN_FROM_SOURCE: mode === 'sources' ? '1' : '0' };
      const measured = await measureCommand(process.execPath, [BIN, ...command.args(job)], { env, cwd: work });
      rmSync(job, { recursive: true, force: true });
      if (measured.exitCode !== 0) throw new Error(`${command.name} (${mode}) failed with status ${measured.exitCode}: ${measured.stderr}`);
      const key = `${command.name}/${mode}`;
      const seen = outputs.get(command.name);
      const output = command.output(measured.stdout);
      if (seen !== undefined && seen !== output) throw new Error(`${command.name}: ${mode} printed other output than the other mode:\n${output}\n---\n${seen}`);
      outputs.set(command.name, output);
      times.set(key, [...(times.get(key) ?? []), measured]);
    }
  }
  process.stderr.write(`round ${round + 1}/${rounds} done\n`);
}
rmSync(work, { recursive: true, force: true });

const seconds = (ms: number): string => (ms / 1000).toFixed(2);
const rows: string[][] = [['command', 'compiled wall s (median, least)', 'sources wall s (median, least)', 'wall ratio', 'CPU s compiled / sources', 'CPU ratio']];
for (const command of COMMANDS) {
  const a = times.get(`${command.name}/compiled`) ?? [];
  const b = times.get(`${command.name}/sources`) ?? [];
  const wallA = median(a.map((m) => m.elapsedMs));
  const wallB = median(b.map((m) => m.elapsedMs));
  const cpuA = median(a.map((m) => m.cpuMs));
  const cpuB = median(b.map((m) => m.cpuMs));
  rows.push([
    command.name,
    `${seconds(wallA)}, ${seconds(Math.min(...a.map((m) => m.elapsedMs)))}`,
    `${seconds(wallB)}, ${seconds(Math.min(...b.map((m) => m.elapsedMs)))}`,
    `${(wallA / wallB).toFixed(2)}×`,
    `${seconds(cpuA)} / ${seconds(cpuB)}`,
    `${(cpuA / cpuB).toFixed(2)}×`,
  ]);
}
process.stdout.write(`bench:startup, ${rounds} rounds, --workers ${workers}; compiled = dist/, sources = QUERN_FROM_SOURCE=1 (tsx)\n`);
process.stdout.write(`${renderTable(rows)}\n`);

// What the launcher's check of dist/ costs at each start: the stamp of src/ (bin/source-stamp.mjs),
// timed in a fresh process, first call (as at a start) and the median of 20 more.
const stampTiming = spawnSync(process.execPath, ['--input-type=module', '-e', `
  const { sourceStamp } = await import(${JSON.stringify(pathToFileURL(join(REPO, 'bin/source-stamp.mjs')).href)});
  const src = ${JSON.stringify(join(REPO, 'src'))};
  let t = performance.now(); sourceStamp(src); const first = performance.now() - t;
  const more = [];
  for (let i = 0; i < 20; i++) { t = performance.now(); sourceStamp(src); more.push(performance.now() - t); }
  more.sort((a, b) => a - b);
  console.log(first.toFixed(1), more[10].toFixed(1));
`], { encoding: 'utf8' });
if (stampTiming.status !== 0) throw new Error(`timing the source stamp failed: ${stampTiming.stderr}`);
const [stampFirst, stampMedian] = stampTiming.stdout.trim().split(' ');
process.stdout.write(`the launcher's source stamp of src/: ${stampFirst} ms the first time in a process (as at a start), ${stampMedian} ms the median of 20 more\n`);
