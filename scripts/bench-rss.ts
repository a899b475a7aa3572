/**
 * Peak RSS of `quern count` against its budget: how far above `--memory` the process goes, for
 * small and large budgets and 1 or 2 workers, beside the floor of a quern process that does
 * nothing (`quern --help`, measured in the same run). This is where the fixed overheads that
 * DEVELOPERS.md states (PROCESS_OVERHEAD_BYTES, WORKER_OVERHEAD_BYTES in src/limits.ts) come from.
 *
 *   npm run bench:rss -- [--corpus-dir DIR | --input FILE] [--order 5] [--memory 128MiB,256MiB,512MiB,1GiB] [--workers 1,2]
 *
 * --corpus-dir  a corpus made by scripts/gen-corpus.ts (default bench-out/corpus-20MB-few-large,
 *               generated there when missing)
 * --input       one input file counted instead of a corpus's shards (e.g. the corpus as one gzip
 *               file, `bench:count --gzip`'s all-shards.txt.gz: its ranges' text held by the workers)
 * Every run counts from scratch into a fresh job directory (removed afterwards), under GNU time
 * (scripts/lib/rss.ts). Results: a table on stdout and bench-out/bench-rss-<timestamp>.json.
 * Exit status 1 when a run exceeds the documented bound `rssBoundBytes(--memory, workers)`.
 */
import { execFileSync } from 'node:child_process';
import { existsSync, mkdtempSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import bytes from 'bytes-iec';
import { rssBoundBytes } from '../src/count/stage.ts';
import { PROCESS_OVERHEAD_BYTES, WORKER_OVERHEAD_BYTES } from '../src/limits.ts';
import { measureCommand } from './lib/rss.ts';
import { ensureCompiled } from './lib/quern-env.ts';

// quern runs compiled, as after npm ci (a stale dist/ is rebuilt first).
ensureCompiled();

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const QUERN_BIN = join(REPO, 'bin/quern.js');
const MIB = 1 << 20;

interface RssRun {
  memoryBytes: number;
  workers: number;
  wallMs: number;
  rssBytesMax: number;
  aboveBudgetBytes: number;
  boundBytes: number;
  withinBound: boolean;
  spills: number;
  loadAverage1m: number;
}

function size(text: string): number {
  const value = bytes.parse(text);
  if (value === null || !(value > 0)) throw new Error(`not a size: ${text}`);
  return value;
}

async function main(): Promise<void> {
  const { values } = parseArgs({
    options: {
      'corpus-dir': { type: 'string' },
      input: { type: 'string' },
      order: { type: 'string', default: '5' },
      memory: { type: 'string', default: '128MiB,256MiB,512MiB,1GiB' },
      workers: { type: 'string', default: '1,2' },
    },
  });
  let shards: string[];
  if (values.input !== undefined) {
    if (values['corpus-dir'] !== undefined) throw new Error('--input and --corpus-dir: give one');
    if (!existsSync(values.input)) throw new Error(`--input: no file ${values.input}`);
    shards = [resolve(values.input)];
  } else {
    const corpusDir = resolve(values['corpus-dir'] ?? join(REPO, 'bench-out/corpus-20MB-few-large'));
    if (!existsSync(join(corpusDir, '.gen-corpus.json'))) {
      execFileSync(process.execPath, ['--import', 'tsx', join(REPO, 'scripts/gen-corpus.ts'), '--bytes', '20MB', '--shape', 'few-large', '--out', corpusDir], { stdio: 'inherit' });
    }
    shards = readdirSync(corpusDir).filter((f) => f.startsWith('shard-')).map((f) => join(corpusDir, f));
  }
  const memories = values.memory.split(',').map(size);
  const workerCounts = values.workers.split(',').map(Number);

  // The floor: a quern process that loads its code and exits.
  const idle = await measureCommand(process.execPath, [QUERN_BIN, '--help'], { cwd: REPO });
  const runs: RssRun[] = [];
  for (const workers of workerCounts) {
    for (const memoryBytes of memories) {
      const job = mkdtempSync(join(os.tmpdir(), 'quern-bench-rss-'));
      const loadAverage1m = os.loadavg()[0];
      const measured = await measureCommand(process.execPath, [
        QUERN_BIN, 'count', ...shards, '--job', join(job, 'job'), '--order', values.order,
        '--workers', String(workers), '--memory', String(memoryBytes), '--quiet', '--json',
      ], { cwd: REPO });
      rmSync(job, { recursive: true, force: true });
      if (measured.exitCode !== 0) throw new Error(`quern count --memory ${memoryBytes} --workers ${workers} failed: ${measured.stderr}`);
      const summary = JSON.parse(measured.stdout) as { spills: number };
      const boundBytes = rssBoundBytes(memoryBytes, workers);
      runs.push({
        memoryBytes, workers, wallMs: measured.elapsedMs, rssBytesMax: measured.rssBytesMax,
        aboveBudgetBytes: measured.rssBytesMax - memoryBytes, boundBytes, withinBound: measured.rssBytesMax <= boundBytes,
        spills: summary.spills, loadAverage1m,
      });
      const r = runs[runs.length - 1];
      process.stderr.write(`--memory ${bytes.format(memoryBytes, { mode: 'binary' })} --workers ${workers}: peak ${(r.rssBytesMax / MIB).toFixed(0)} MiB, ${(r.aboveBudgetBytes / MIB).toFixed(0)} MiB above the budget, ${r.spills} spills\n`);
    }
  }

  const rows = [['--memory', 'workers', 'peak RSS MiB', 'above budget MiB', 'bound MiB', 'within', 'spills', 'wall s', 'load']];
  for (const r of runs) {
    rows.push([bytes.format(r.memoryBytes, { mode: 'binary' }) ?? '', String(r.workers), (r.rssBytesMax / MIB).toFixed(0), (r.aboveBudgetBytes / MIB).toFixed(0),
      (r.boundBytes / MIB).toFixed(0), r.withinBound ? 'yes' : 'NO', String(r.spills), (r.wallMs / 1000).toFixed(1), r.loadAverage1m.toFixed(1)]);
  }
  const widths = rows[0].map((_, c) => Math.max(...rows.map((row) => row[c].length)));
  for (const row of rows) process.stdout.write(row.map((cell, c) => cell.padStart(widths[c])).join('  ') + '\n');
  process.stdout.write(`floor: quern --help peaks at ${(idle.rssBytesMax / MIB).toFixed(0)} MiB\n`);
  process.stdout.write(`documented bound: --memory + ${PROCESS_OVERHEAD_BYTES / MIB} MiB + workers × ${WORKER_OVERHEAD_BYTES / MIB} MiB\n`);
  for (const w of workerCounts) {
    const worst = Math.max(...runs.filter((r) => r.workers === w).map((r) => r.aboveBudgetBytes));
    process.stdout.write(`largest excess with ${w} worker(s): ${(worst / MIB).toFixed(0)} MiB\n`);
  }
  const out = join(REPO, 'bench-out', `bench-rss-${new Date().toISOString().replace(/[:.]/g, '-')}.json`);
  writeFileSync(out, JSON.stringify({ benchmark: 'scripts/bench-rss.ts', inputs: shards, order: Number(values.order), idleRssBytes: idle.rssBytesMax, runs }, null, 1) + '\n');
  process.stdout.write(`results: ${out}\n`);
  if (runs.some((r) => !r.withinBound)) process.exitCode = 1;
}

await main();
