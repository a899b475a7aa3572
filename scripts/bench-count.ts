/**
 * Benchmark of `quern count` against the plain shell pipeline that counts the same n-grams,
 * measured side by side in one run, on seeded synthetic corpora of two shapes (a few large shards
 * and many small ones, as ripgrep's benchmark suite does).
 *
 *   npm run bench:count -- [--bytes 200MB] [--shape few-large|many-small|both] [--orders 3,5]
 *                          [--memory 2GiB] [--workers 2] [--corpus-dir DIR] [--seed 1] [--keep] [--skip-pipeline]
 *                          [--against REV] [--repeat N] [--gzip] [--gzip-shards N]
 *
 * --bytes       corpus size, all shards together (default 200MB; 1GB for the large variant)
 * --shape       few-large (2 shards), many-small (200 shards) or both (default), one after the other
 * --orders      highest orders to count, each a separate pair of runs (default 3,5)
 * --memory      quern's --memory and the pipeline's `sort -S` (default 2GiB)
 * --workers     quern's --workers and the pipeline's `sort --parallel` (default 2)
 * --corpus-dir  where the corpus is generated or reused (default bench-out/corpus-<bytes>-<shape>;
 *               only with a single shape). A corpus whose .gen-corpus.json matches the options is
 *               reused; otherwise it is regenerated there with scripts/gen-corpus.ts.
 * --seed        corpus seed (default 1)
 * --skip-pipeline  time quern alone: the store, memory and stage figures without the throughput
 *               ratio (for the 1 GB store measurement once the pipeline's time at that size is known)
 * --against     a git revision: its src/ and bin/ are extracted (git archive) to a scratch folder, and
 *               its `quern count` runs beside this checkout's on the same corpus, alternately, under
 *               the same options; both jobs' stores must hold the same counts (a digest of the raw and
 *               the continuation key spaces, src/merge/digest.ts) and the same stats.json, or the
 *               benchmark stops with exit status 1. Prints this checkout's time over REV's, per run
 *               and per stage (the medians of --repeat runs each)
 * --repeat      runs of each quern (and of the --against one) per shape and order, alternating
 *               (default 1); the pipeline runs once
 * --gzip        quern counts the corpus as one gzip file (its shards concatenated, `gzip -1`, made once
 *               and kept beside them as all-shards.txt.gz); needs --skip-pipeline (the pipeline reads
 *               the shards). With --against, how the two builds count one large gzip input
 * --gzip-shards N  as --gzip, but the concatenated text split at line ends into N parts of about equal
 *               size, each its own `gzip -1` file (made once, kept in gzip-N/ beside the shards): how
 *               a corpus of several mid-size gzip shards is counted
 * --keep        keep quern's job directories and the pipeline's `uniq -c` output under
 *               bench-out/work/ (by default each is removed once its counts are checked; the corpus
 *               is always kept, so the next run can reuse it)
 *
 * For each shape and order, both tools run under GNU time (wall time and peak RSS, see
 * scripts/lib/rss.ts):
 *   quern     node bin/quern.js count SHARDS --job FRESH_DIR --order N --workers K --memory M --quiet --json
 *             (in the environment bin/quern.js gives Node when run as a program: huge pages on)
 *   pipeline  LC_ALL=C awk '<emit n-grams>' SHARDS | LC_ALL=C sort -S M --parallel=K -T TMP | LC_ALL=C uniq -c > OUT
 * The awk program is the one of test/support/reference-count.ts, so the pipeline follows the
 * project's conventions exactly. The benchmark then checks that both counted the same thing — the
 * distinct n-grams and the occurrences of every order — and stops with exit status 1 if not.
 *
 * Throughput is the corpus's tokens (words, as quern reports them) over the wall time measured by
 * GNU time, start-up included, for both tools. Beside it, each run's CPU time (user + system, all
 * its processes and threads, GNU time), which moves less than wall time with a shared machine's
 * load; with --against, the ratio of the CPU times too. The pipeline's peak RSS is that of its largest
 * process (sort), as GNU time reports for a command's descendants; quern's is the whole process,
 * worker threads included. Quern's peak RSS is compared with the bound DEVELOPERS.md states,
 * `rssBoundBytes(--memory, workers)`; a run above it ends the benchmark with exit status 1 after
 * the table is printed. The targets (≥ 8× the pipeline's throughput at order 3, ≥ 5× at order 5)
 * are printed beside the ratios but do not change the exit status.
 *
 * Results go to stdout as a table and to bench-out/bench-count-<timestamp>.json.
 */
import bytesIec from 'bytes-iec';
import { spawnSync } from 'node:child_process';
import { createReadStream, existsSync, mkdirSync, readFileSync, renameSync, rmSync, statSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import { basename, join, relative, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { rssBoundBytes } from '../src/count/stage.ts';
import { PROCESS_OVERHEAD_BYTES, WORKER_OVERHEAD_BYTES, ORDER_MAX } from '../src/limits.ts';
import { AWK_PROGRAM } from '../test/support/reference-count.ts';
import { tallyUniqCounts, type OrderTally } from './lib/bench-uniq-tally.ts';
import { ensureCompiled, quernProgramEnv } from './lib/quern-env.ts';
import { extractRevision } from './lib/revision-tree.ts';
import { measureCommand, type Measurement } from './lib/rss.ts';
import { median, renderTable } from './lib/table.ts';
import { SHAPE_SHARDS, shardName, type CorpusShape } from './lib/synthetic.ts';
import { storeDigest } from '../src/merge/digest.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../src/merge/store.ts';
import { mergeRuns } from '../src/count/run-merge.ts';
import { createHash } from 'node:crypto';

// quern runs compiled, as after npm ci (a stale dist/ is rebuilt first).
ensureCompiled();

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const BENCH_OUT = join(REPO, 'bench-out');
const WORK_DIR = join(BENCH_OUT, 'work');
const QUERN_BIN = join(REPO, 'bin/quern.js');
const GEN_CORPUS = join(REPO, 'scripts/gen-corpus.ts');
const CORPUS_MANIFEST = '.gen-corpus.json';
/** Vocabulary size gen-corpus uses by default; the reuse check compares against it. */
const CORPUS_VOCABULARY_TYPES = 200_000;

/** Throughput targets of the issue: quern's tokens/s over the pipeline's, by order. */
const TARGET_RATIOS: Readonly<Record<number, number>> = { 3: 8, 5: 5 };

const SHAPES: readonly CorpusShape[] = ['few-large', 'many-small'];

/** The pipeline; "$@" are the shards. pipefail so that a failing awk or sort fails the run. */
const PIPELINE_SCRIPT =
  'set -o pipefail; LC_ALL=C awk -v order="$BENCH_ORDER" -v lowercase=0 "$BENCH_AWK" "$@" ' +
  '| LC_ALL=C sort -S "$BENCH_SORT_BYTES"b --parallel="$BENCH_SORT_PARALLEL" -T "$BENCH_SORT_TMP" ' +
  '| LC_ALL=C uniq -c > "$BENCH_OUT"';

interface Options {
  bytes: number;
  shapes: CorpusShape[];
  orders: number[];
  memoryBytes: number;
  workers: number;
  corpusDir: string | null;
  /** Count the corpus as this many gzip files (--gzip: 1, --gzip-shards N), or as its plain shards (0). */
  gzipShards: number;
  seed: number;
  keep: boolean;
  /** Time quern alone (the store and memory figures; no throughput ratio). */
  skipPipeline: boolean;
  /** A git revision whose quern count runs beside this checkout's, or null. */
  against: string | null;
  /** Runs of each quern per shape and order, alternating. */
  repeat: number;
}

interface CorpusManifest {
  seed: number;
  vocabularyTypes: number;
  shape: string | null;
  shardCount: number;
  bytes: number;
  sentences: number;
  tokens: number;
  shards: Array<{ name: string; bytes: number }>;
}

interface Corpus {
  shape: CorpusShape;
  dir: string;
  files: string[];
  manifest: CorpusManifest;
  generated: boolean;
}

interface ToolResult {
  tool: 'quern' | 'pipeline';
  wallMs: number;
  /** User + system CPU time of all its processes and threads (GNU time): moves less than wall time
   *  with a shared machine's load. */
  cpuMs: number;
  tokensPerSecond: number;
  rssBytesMax: number;
  distinct: number[];
  occurrences: number[];
  loadAverage1m: number;
}

interface QuernResult extends ToolResult {
  tool: 'quern';
  /** Quern's own summary fields of interest. */
  selfElapsedMs: number;
  selfTokensPerSecond: number;
  spills: number;
  runFiles: number;
  runBytes: number;
  storeBytes: number | null;
  /** Quern's time per stage (vocabulary pass, n-gram pass, merge), as it reports it. */
  stageMs: Record<string, number> | null;
  workers: number;
  rssBoundBytes: number;
  withinBound: boolean;
  overheadAboveMemoryBytes: number;
  /** Distinct n-grams (all orders) per second of merging into the store. */
  mergeNgramsPerSecond: number | null;
  storeBytesPerNgram: number | null;
  /** Wall time of `quern report --json` on the finished job. */
  reportWallMs: number;
  /** Which quern: 'this' checkout or the --against revision. */
  build: string;
}

interface PairResult {
  shape: CorpusShape;
  order: number;
  tokens: number;
  quern: QuernResult;
  /** null with --skip-pipeline. */
  pipeline: ToolResult | null;
  /** quern tokens/s over pipeline tokens/s (null without the pipeline). */
  ratio: number | null;
  targetRatio: number | null;
  targetMet: boolean | null;
  /** --against: the runs of each build, alternating (this checkout's first in each pair). */
  runs?: { this: QuernResult[]; against: QuernResult[] };
}

function fail(message: string): never {
  process.stderr.write(`bench-count: ${message}\n`);
  process.exit(2);
}

function parseOptions(argv: string[]): Options {
  let parsed;
  try {
    parsed = parseArgs({
      args: argv,
      strict: true,
      options: {
        bytes: { type: 'string', default: '200MB' },
        shape: { type: 'string', default: 'both' },
        orders: { type: 'string', default: '3,5' },
        memory: { type: 'string', default: '2GiB' },
        workers: { type: 'string', default: '2' },
        'corpus-dir': { type: 'string' },
        seed: { type: 'string', default: '1' },
        keep: { type: 'boolean', default: false },
        'skip-pipeline': { type: 'boolean', default: false },
        against: { type: 'string' },
        repeat: { type: 'string', default: '1' },
        gzip: { type: 'boolean', default: false },
        'gzip-shards': { type: 'string' },
      },
    });
  } catch (error) {
    fail((error as Error).message);
  }
  const v = parsed.values;
  const bytes = bytesIec.parse(v.bytes);
  if (bytes === null || !Number.isFinite(bytes) || bytes < 1) fail(`--bytes: not a size: ${v.bytes}`);
  let shapes: CorpusShape[];
  if (v.shape === 'both') shapes = [...SHAPES];
  else if ((SHAPES as readonly string[]).includes(v.shape)) shapes = [v.shape as CorpusShape];
  else fail(`--shape must be few-large, many-small or both, got ${v.shape}`);
  const orders = v.orders.split(',').map((text) => Number(text.trim()));
  for (const order of orders) {
    if (!Number.isInteger(order) || order < 1 || order > ORDER_MAX) fail(`--orders: each order must be an integer in [1, ${ORDER_MAX}], got ${v.orders}`);
  }
  if (new Set(orders).size !== orders.length) fail(`--orders: an order is listed twice: ${v.orders}`);
  const memoryBytes = bytesIec.parse(v.memory);
  if (memoryBytes === null || !Number.isFinite(memoryBytes) || memoryBytes < 1 << 20) fail(`--memory: a size of at least 1MiB, got ${v.memory}`);
  const workers = Number(v.workers);
  if (!Number.isInteger(workers) || workers < 1 || workers > 256) fail(`--workers must be an integer in [1, 256], got ${v.workers}`);
  const seed = Number(v.seed);
  if (!Number.isSafeInteger(seed)) fail(`--seed must be an integer, got ${v.seed}`);
  const corpusDir = v['corpus-dir'] === undefined ? null : resolve(v['corpus-dir']);
  if (corpusDir !== null && shapes.length > 1) fail('--corpus-dir needs a single --shape (each shape has its own corpus)');
  const repeat = Number(v.repeat);
  if (!Number.isInteger(repeat) || repeat < 1 || repeat > 20) fail(`--repeat must be an integer in [1, 20], got ${v.repeat}`);
  const gzipShards = v['gzip-shards'] !== undefined ? Number(v['gzip-shards']) : v.gzip === true ? 1 : 0;
  if (!Number.isInteger(gzipShards) || gzipShards < (v['gzip-shards'] !== undefined ? 1 : 0) || gzipShards > 1000) fail(`--gzip-shards must be an integer in [1, 1000], got ${v['gzip-shards']}`);
  if (gzipShards > 0 && v['skip-pipeline'] !== true) fail('--gzip and --gzip-shards need --skip-pipeline (the pipeline reads the plain shards)');
  return {
    bytes: Math.floor(bytes), shapes, orders, memoryBytes: Math.floor(memoryBytes), workers, corpusDir, seed, keep: v.keep === true,
    skipPipeline: v['skip-pipeline'] === true, against: v.against ?? null, repeat, gzipShards,
  };
}

// ---- Corpus ----------------------------------------------------------------------------------

function readCorpusManifest(dir: string): CorpusManifest | null {
  try {
    return JSON.parse(readFileSync(join(dir, CORPUS_MANIFEST), 'utf8')) as CorpusManifest;
  } catch {
    return null;
  }
}

function corpusMatches(manifest: CorpusManifest | null, dir: string, options: Options, shape: CorpusShape): manifest is CorpusManifest {
  if (manifest === null) return false;
  const shardCount = SHAPE_SHARDS[shape];
  if (manifest.seed !== options.seed || manifest.bytes !== options.bytes || manifest.shardCount !== shardCount) return false;
  if (manifest.vocabularyTypes !== CORPUS_VOCABULARY_TYPES || manifest.shards.length !== shardCount) return false;
  // The shards must still be there, whole.
  return manifest.shards.every((shard, index) => {
    if (shard.name !== shardName(index)) return false;
    try {
      return statSync(join(dir, shard.name)).size === shard.bytes;
    } catch {
      return false;
    }
  });
}

/** Reuses the corpus in `dir` when its manifest matches the options, else generates it there. */
function prepareCorpus(options: Options, shape: CorpusShape): Corpus {
  const dir = options.corpusDir ?? join(BENCH_OUT, `corpus-${bytesIec.format(options.bytes)}-${shape}`);
  let generated = false;
  if (!corpusMatches(readCorpusManifest(dir), dir, options, shape)) {
    log(`generating ${bytesIec.format(options.bytes)} corpus, shape ${shape}, seed ${options.seed} in ${relative(REPO, dir) || dir} …`);
    const result = spawnSync(
      process.execPath,
      ['--import', 'tsx', GEN_CORPUS, '--bytes', String(options.bytes), '--out', dir, '--shape', shape, '--seed', String(options.seed), '--overwrite'],
      { cwd: REPO, stdio: ['ignore', 'pipe', 'inherit'] },
    );
    if (result.status !== 0) fail(`gen-corpus failed (exit ${result.status ?? result.signal})`);
    log(`  ${result.stdout.toString('utf8').trim()}`);
    generated = true;
  }
  const manifest = readCorpusManifest(dir);
  if (!corpusMatches(manifest, dir, options, shape)) fail(`corpus in ${dir} does not match the options after generating it`);
  const files = manifest.shards.map((shard) => join(dir, shard.name));
  return { shape, dir, files: options.gzipShards === 1 ? [gzipCorpus(dir, files)] : options.gzipShards > 1 ? gzipShardsOf(dir, files, options.gzipShards) : files, manifest, generated };
}

/** The shards concatenated into one gzip file in `dir` (made once; a half-written one never counts). */
function gzipCorpus(dir: string, files: readonly string[]): string {
  const target = join(dir, 'all-shards.txt.gz');
  if (existsSync(target)) return target;
  log(`compressing the shards into ${relative(REPO, target) || target} (gzip -1) …`);
  const partial = `${target}.partial`;
  const result = spawnSync('bash', ['-c', 'set -o pipefail; cat "$@" | gzip -1 > "$PARTIAL"', 'gzip-corpus', ...files], { env: { ...process.env, PARTIAL: partial }, stdio: ['ignore', 'inherit', 'inherit'] });
  if (result.status !== 0) fail(`compressing the corpus failed (exit ${result.status ?? result.signal})`);
  renameSync(partial, target);
  return target;
}

/** The shards' text split at line ends into `count` parts, each gzip -1 (made once, in `dir`/gzip-<count>/;
 *  a half-made folder never counts). */
function gzipShardsOf(dir: string, files: readonly string[], count: number): string[] {
  const target = join(dir, `gzip-${count}`);
  const names = Array.from({ length: count }, (_, index) => `part-${String(index).padStart(4, '0')}.txt.gz`);
  if (!existsSync(target)) {
    log(`splitting the shards into ${count} gzip files in ${relative(REPO, target) || target} (gzip -1) …`);
    const partial = `${target}.partial`;
    rmSync(partial, { recursive: true, force: true });
    mkdirSync(partial, { recursive: true });
    // split -n l/N needs a file; each part goes through gzip -1 as it is written (--filter).
    const joined = join(partial, 'all.txt');
    const script = 'set -o pipefail; cat "$@" > "$JOINED" && split -n l/$COUNT -a 4 -d --additional-suffix=.txt --filter=\'gzip -1 > "$FILE.gz"\' "$JOINED" "$OUT/part-" && rm "$JOINED"';
    const result = spawnSync('bash', ['-c', script, 'gzip-shards', ...files], { env: { ...process.env, JOINED: joined, COUNT: String(count), OUT: partial }, stdio: ['ignore', 'inherit', 'inherit'] });
    if (result.status !== 0) fail(`splitting the corpus failed (exit ${result.status ?? result.signal})`);
    renameSync(partial, target);
  }
  const paths = names.map((name) => join(target, name));
  for (const file of paths) if (!existsSync(file)) fail(`${file} is missing: remove ${target} to make the parts again`);
  return paths;
}

/** Reads every shard once, so neither tool pays for a cold page cache. */
async function warmPageCache(files: readonly string[]): Promise<void> {
  for (const file of files) {
    for await (const _ of createReadStream(file, { highWaterMark: 1 << 20 })) {
      // Reading is the point.
    }
  }
}

// ---- Runs ------------------------------------------------------------------------------------

function checkMeasured(what: string, measured: Measurement): void {
  if (measured.exitCode === 0) return;
  const how = measured.signal !== null ? `signal ${measured.signal}` : `exit ${measured.exitCode}`;
  throw new Error(`${what} failed (${how}): ${measured.stderr.trim().slice(-2000)}`);
}

/** A quern to run: this checkout's, or the --against revision's extracted tree. */
interface QuernBuild {
  name: string;
  bin: string;
  cwd: string;
}

const THIS_BUILD: QuernBuild = { name: 'this', bin: QUERN_BIN, cwd: REPO };

/**
 * --against REV: REV's src/ and bin/ (with package.json and tsconfig.json) extracted by git archive
 * into a scratch folder beside this checkout's node_modules, so that its bin/quern.js runs REV's code.
 */
function againstBuild(revision: string): QuernBuild {
  const { hash, tree } = extractRevision(REPO, revision, ['src', 'bin', 'package.json', 'tsconfig.json'], (h) => join(WORK_DIR, `count-against-${h}-${process.pid}`));
  return { name: hash, bin: join(tree, 'bin/quern.js'), cwd: tree };
}

/** The job directory of a build's run on a corpus at an order. */
function quernJobDir(corpus: Corpus, order: number, build: QuernBuild): string {
  // Named by the corpus directory too, so that a kept job of one corpus size survives a run on another.
  return join(WORK_DIR, `${basename(corpus.dir)}-order${order}-quern-job${build === THIS_BUILD ? '' : `-${build.name}`}`);
}

/**
 * A digest of a job's counts: the raw counts (storeDigest) and the continuation counts of every
 * order below the highest, in key order, merged over the partitions.
 */
async function countsDigest(jobDir: string, order: number): Promise<string> {
  const job = JSON.parse(readFileSync(join(jobDir, 'job.json'), 'utf8')) as { config: { partitions: number } };
  const partitions = job.config.partitions;
  const hash = createHash('sha256').update(await storeDigest(jobDir, order, partitions));
  const stores = Array.from({ length: partitions }, (_, p) => PartitionStore.open(join(jobDir, partitionStoreDir(p)), 'read'));
  try {
    for (let m = 1; m < order; m++) {
      hash.update(`continuation ${m}\n`);
      for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, m, undefined, 'continuation')), m)) {
        hash.update(new Uint8Array(batch.keys.buffer, batch.keys.byteOffset, batch.recordCount * m * 4));
        hash.update(new Uint8Array(batch.counts.buffer, batch.counts.byteOffset, batch.recordCount * 8));
      }
    }
  } finally {
    await Promise.all(stores.map((s) => s.close()));
  }
  hash.update(readFileSync(join(jobDir, 'stats.json')));
  return hash.digest('hex');
}

async function runQuern(corpus: Corpus, order: number, options: Options, build: QuernBuild = THIS_BUILD, keepJob = options.keep): Promise<QuernResult> {
  const jobDir = quernJobDir(corpus, order, build);
  rmSync(jobDir, { recursive: true, force: true }); // a fresh job every time
  const args = [
    build.bin, 'count', ...corpus.files, '--job', jobDir, '--order', String(order),
    '--workers', String(options.workers), '--memory', String(options.memoryBytes), '--quiet', '--json',
  ];
  const loadAverage1m = os.loadavg()[0];
  // As `quern` runs when started as a program: with the launcher's huge-page tunable (bin/quern.js).
  const measured = await measureCommand(process.execPath, args, { cwd: build.cwd, env: quernProgramEnv() });
  checkMeasured(`quern count ${build.name} (${corpus.shape}, order ${order})`, measured);
  const summary = JSON.parse(measured.stdout) as {
    tokens: number; distinct: number[]; occurrences: number[]; spills: number; runFiles: number; runBytes: number;
    elapsedMs: number; tokensPerSecond: number; memoryBytes: number; workers: number;
    storeBytes?: number; stageMs?: Record<string, number>;
  };
  // `quern report` on the finished job: answered from what the merge kept (issue target < 2 s).
  const report = await measureCommand(process.execPath, [build.bin, 'report', jobDir, '--json'], { cwd: build.cwd });
  checkMeasured(`quern report ${build.name} (${corpus.shape}, order ${order})`, report);
  if (!keepJob) rmSync(jobDir, { recursive: true, force: true });
  if (summary.tokens !== corpus.manifest.tokens) {
    throw new Error(`quern counted ${summary.tokens} tokens, the corpus manifest says ${corpus.manifest.tokens}`);
  }
  if (summary.memoryBytes !== options.memoryBytes) throw new Error(`quern ran with --memory ${summary.memoryBytes}, asked ${options.memoryBytes}`);
  const bound = rssBoundBytes(summary.memoryBytes, summary.workers);
  return {
    tool: 'quern',
    wallMs: measured.elapsedMs,
    cpuMs: measured.cpuMs,
    tokensPerSecond: perSecond(corpus.manifest.tokens, measured.elapsedMs),
    rssBytesMax: measured.rssBytesMax,
    distinct: summary.distinct,
    occurrences: summary.occurrences,
    loadAverage1m,
    selfElapsedMs: summary.elapsedMs,
    selfTokensPerSecond: summary.tokensPerSecond,
    spills: summary.spills,
    runFiles: summary.runFiles,
    runBytes: summary.runBytes,
    storeBytes: summary.storeBytes ?? null,
    stageMs: summary.stageMs ?? null,
    workers: summary.workers,
    rssBoundBytes: bound,
    withinBound: measured.rssBytesMax <= bound,
    overheadAboveMemoryBytes: measured.rssBytesMax - summary.memoryBytes,
    ...mergeFigures(summary),
    reportWallMs: report.elapsedMs,
    build: build.name,
  };
}

/** Merge throughput (distinct n-grams of all orders into the store per second of the merge
 *  stage) and the store's bytes per n-gram on disk (both key spaces). */
function mergeFigures(summary: { distinct: number[]; storeBytes?: number; stageMs?: Record<string, number> }): { mergeNgramsPerSecond: number | null; storeBytesPerNgram: number | null } {
  const ngrams = summary.distinct.reduce((a, b) => a + b, 0);
  const mergeMs = summary.stageMs?.merge;
  return {
    mergeNgramsPerSecond: mergeMs ? Math.round((ngrams / mergeMs) * 1000) : null,
    storeBytesPerNgram: summary.storeBytes ? Math.round((summary.storeBytes / ngrams) * 100) / 100 : null,
  };
}

async function runPipeline(corpus: Corpus, order: number, options: Options): Promise<ToolResult> {
  const outPath = join(WORK_DIR, `${basename(corpus.dir)}-order${order}-pipeline.uniq-c.txt`);
  const sortTmp = join(WORK_DIR, 'sort-tmp');
  rmSync(outPath, { force: true });
  rmSync(sortTmp, { recursive: true, force: true });
  mkdirSync(sortTmp, { recursive: true });
  const env = {
    ...process.env,
    BENCH_ORDER: String(order),
    BENCH_AWK: AWK_PROGRAM,
    BENCH_SORT_BYTES: String(options.memoryBytes),
    BENCH_SORT_PARALLEL: String(options.workers),
    BENCH_SORT_TMP: sortTmp,
    BENCH_OUT: outPath,
  };
  const loadAverage1m = os.loadavg()[0];
  const measured = await measureCommand('bash', ['-c', PIPELINE_SCRIPT, 'bench-pipeline', ...corpus.files], { cwd: REPO, env });
  rmSync(sortTmp, { recursive: true, force: true });
  checkMeasured(`pipeline (${corpus.shape}, order ${order})`, measured);
  let tally: OrderTally;
  try {
    tally = await tallyUniqCounts(outPath, order);
  } finally {
    if (!options.keep) rmSync(outPath, { force: true });
  }
  return {
    tool: 'pipeline',
    wallMs: measured.elapsedMs,
    cpuMs: measured.cpuMs,
    tokensPerSecond: perSecond(corpus.manifest.tokens, measured.elapsedMs),
    rssBytesMax: measured.rssBytesMax,
    distinct: tally.distinct,
    occurrences: tally.occurrences,
    loadAverage1m,
  };
}

/** The differences between what the two tools counted, one line each; empty when they agree. */
function countDifferences(quern: ToolResult, pipeline: ToolResult, order: number, corpus: Corpus): string[] {
  const differences: string[] = [];
  for (let n = 1; n <= order; n++) {
    const q = { distinct: quern.distinct[n - 1], occurrences: quern.occurrences[n - 1] };
    const p = { distinct: pipeline.distinct[n - 1], occurrences: pipeline.occurrences[n - 1] };
    if (q.distinct !== p.distinct) differences.push(`order ${n}: quern ${q.distinct} distinct, pipeline ${p.distinct}`);
    if (q.occurrences !== p.occurrences) differences.push(`order ${n}: quern ${q.occurrences} occurrences, pipeline ${p.occurrences}`);
  }
  if (quern.distinct.length !== order) differences.push(`quern reported ${quern.distinct.length} orders, asked ${order}`);
  // Every token and every sentence end is a unigram occurrence (source: the corpus manifest).
  const unigrams = corpus.manifest.tokens + corpus.manifest.sentences;
  if (pipeline.occurrences[0] !== unigrams) differences.push(`pipeline ${pipeline.occurrences[0]} unigram occurrences, corpus has ${unigrams} tokens + sentence ends`);
  return differences;
}

// ---- Output ----------------------------------------------------------------------------------

function log(line: string): void {
  process.stderr.write(`${line}\n`);
}

function perSecond(tokens: number, ms: number): number {
  return ms > 0 ? Math.round((tokens / ms) * 1000) : 0;
}

function formatSize(bytes: number): string {
  const sign = bytes < 0 ? '-' : '';
  return sign + (bytesIec.format(Math.abs(bytes), { mode: 'binary', decimalPlaces: 1 }) ?? `${bytes} B`);
}

function formatRate(perSecondValue: number): string {
  if (perSecondValue >= 1e6) return `${(perSecondValue / 1e6).toFixed(2)} M`;
  if (perSecondValue >= 1e3) return `${(perSecondValue / 1e3).toFixed(1)} k`;
  return String(perSecondValue);
}

/** Quern's stage times as `vocabulary 1.2 + count 3.4 + merge 0.5`. */
function formatStages(stageMs: Record<string, number> | null): string {
  if (stageMs === null) return '—';
  return Object.entries(stageMs).map(([stage, ms]) => `${stage} ${(ms / 1000).toFixed(1)}`).join(' + ');
}

function printResults(results: readonly PairResult[], options: Options): void {
  const rows: string[][] = [['shape', 'order', 'tool', 'wall s', 'CPU s', 'tokens/s', 'peak RSS', 'quern/pipeline', 'target', 'met', 'load']];
  for (const r of results) {
    const target = r.targetRatio === null ? '—' : `≥ ${r.targetRatio}×`;
    const met = r.targetMet === null ? '—' : r.targetMet ? 'yes' : 'NO';
    rows.push([r.shape, String(r.order), 'quern', (r.quern.wallMs / 1000).toFixed(2), (r.quern.cpuMs / 1000).toFixed(2), formatRate(r.quern.tokensPerSecond), formatSize(r.quern.rssBytesMax), r.ratio === null ? '—' : `${r.ratio.toFixed(2)}×`, target, met, r.quern.loadAverage1m.toFixed(1)]);
    if (r.pipeline) rows.push([r.shape, String(r.order), 'pipeline', (r.pipeline.wallMs / 1000).toFixed(2), (r.pipeline.cpuMs / 1000).toFixed(2), formatRate(r.pipeline.tokensPerSecond), formatSize(r.pipeline.rssBytesMax), '', '', '', r.pipeline.loadAverage1m.toFixed(1)]);
  }
  process.stdout.write(`\n${renderTable(rows, new Set([1, 3, 4, 5, 6, 7, 10]))}\n`);
  process.stdout.write(`(load: the machine's 1-minute load average as the run started; above ${os.availableParallelism()} other work shared the CPUs)\n\n`);

  const workers = results[0]?.quern.workers ?? options.workers;
  process.stdout.write(
    `quern peak RSS against the documented bound: --memory ${formatSize(options.memoryBytes)} + ${formatSize(PROCESS_OVERHEAD_BYTES)} ` +
      `+ ${workers} × ${formatSize(WORKER_OVERHEAD_BYTES)} = ${formatSize(rssBoundBytes(options.memoryBytes, workers))}\n`,
  );
  const boundRows: string[][] = [['shape', 'order', 'peak RSS', 'bound', 'within', 'above --memory', 'spills', 'run files', 'stages s']];
  for (const r of results) {
    boundRows.push([
      r.shape, String(r.order), formatSize(r.quern.rssBytesMax), formatSize(r.quern.rssBoundBytes), r.quern.withinBound ? 'yes' : 'EXCEEDED',
      formatSize(r.quern.overheadAboveMemoryBytes), String(r.quern.spills), String(r.quern.runFiles), formatStages(r.quern.stageMs),
    ]);
  }
  process.stdout.write(`${renderTable(boundRows, new Set([1, 2, 3, 5, 6, 7]))}\n`);
  if (results.some((r) => r.quern.spills === 0)) {
    process.stdout.write('(a run with 0 spills never filled its budget, so its figure above --memory is not the overhead at a full budget)\n');
  }
  const storeRows: string[][] = [['shape', 'order', 'merge n-grams/s', 'store B/n-gram', 'merge ÷ count stage', '(merge + continuation) ÷ count', 'quern report s']];
  for (const r of results) {
    const stages = r.quern.stageMs;
    storeRows.push([
      r.shape, String(r.order),
      r.quern.mergeNgramsPerSecond === null ? '—' : formatRate(r.quern.mergeNgramsPerSecond),
      r.quern.storeBytesPerNgram === null ? '—' : r.quern.storeBytesPerNgram.toFixed(2),
      stages?.merge && stages?.count ? `${(stages.merge / stages.count).toFixed(2)}×` : '—',
      stages?.merge && stages?.count ? `${((stages.merge + (stages.continuation ?? 0)) / stages.count).toFixed(2)}×` : '—',
      (r.quern.reportWallMs / 1000).toFixed(2),
    ]);
  }
  process.stdout.write(`${renderTable(storeRows, new Set([1, 2, 3, 4, 5, 6]))}\n`);
}

function toolVersions(): Record<string, string> {
  const first = (command: string, args: string[]): string => {
    const result = spawnSync(command, args, { encoding: 'utf8' });
    return `${result.stdout ?? ''}${result.stderr ?? ''}`.split('\n')[0].trim();
  };
  return { node: process.version, awk: first('awk', ['-W', 'version']), sort: first('sort', ['--version']), uniq: first('uniq', ['--version']) };
}

function writeJson(path: string, value: unknown): void {
  writeFileSync(`${path}.tmp`, JSON.stringify(value, null, 2) + '\n');
  renameSync(`${path}.tmp`, path);
}

/** The run of median wall time (the lower middle one of an even number). */
function medianRun(runs: readonly QuernResult[]): QuernResult {
  const sorted = [...runs].sort((a, b) => a.wallMs - b.wallMs);
  return sorted[Math.floor((sorted.length - 1) / 2)];
}

/** --against: this checkout's times over REV's, whole command and per stage (medians), and each pair. */
function printAgainst(results: readonly PairResult[], name: string): void {
  const stages = ['vocabulary', 'count', 'merge', 'continuation'];
  const rows: string[][] = [['shape', 'order', 'build', 'wall s (each run)', 'median', 'CPU s', ...stages.map((s) => `${s} s`), 'peak RSS', 'load']];
  const ratios: string[] = [];
  for (const r of results) {
    if (!r.runs) continue;
    for (const [build, runs] of [['this', r.runs.this], [name, r.runs.against]] as const) {
      rows.push([
        r.shape, String(r.order), build, runs.map((q) => (q.wallMs / 1000).toFixed(2)).join(' '), (median(runs.map((q) => q.wallMs)) / 1000).toFixed(2),
        (median(runs.map((q) => q.cpuMs)) / 1000).toFixed(2),
        ...stages.map((stage) => (median(runs.map((q) => q.stageMs?.[stage] ?? 0)) / 1000).toFixed(2)),
        formatSize(Math.max(...runs.map((q) => q.rssBytesMax))), runs.map((q) => q.loadAverage1m.toFixed(1)).join(' '),
      ]);
    }
    const ratio = (f: (q: QuernResult) => number): string => (median(r.runs!.this.map(f)) / median(r.runs!.against.map(f))).toFixed(2);
    ratios.push(`${r.shape}, order ${r.order}: this checkout ${ratio((q) => q.wallMs)}× ${name}'s wall time, ${ratio((q) => q.cpuMs)}× its CPU time; by stage ` +
      stages.map((stage) => `${stage} ${ratio((q) => q.stageMs?.[stage] ?? 0)}×`).join(', ') + ` (medians of ${r.runs.this.length} runs each, alternating)`);
    // Each run over the other build's run of the same round: when these disagree, the machine's
    // speed moved during the benchmark more than the builds differ (seen: 0.85× from two rounds,
    // 0.97× from four on an idle machine, for the same pair of builds).
    const pairs = r.runs.this.map((q, i) => q.cpuMs / r.runs!.against[i].cpuMs);
    const spread = Math.max(...pairs) - Math.min(...pairs);
    ratios.push(`  CPU time round by round: ${pairs.map((x) => `${x.toFixed(2)}×`).join(' ')}` +
      (pairs.length < 2 || spread > 0.1 ? ` — ${pairs.length < 2 ? 'one round' : `spread ${spread.toFixed(2)}`}: too few or too scattered to tell a change of a few per cent from the machine's drift; more --repeat` : ''));
  }
  process.stdout.write(`\nquern count of this checkout beside ${name}'s, same corpus and options, alternately:\n${renderTable(rows, new Set([1, 4, 5, 6, 7, 8, 9, 10]))}\n`);
  for (const line of ratios) process.stdout.write(`${line}\n`);
}

// ---- Main ------------------------------------------------------------------------------------

/** Runs every shape and order, appending to `corpora` and `results`; exits 1 if counts differ. */
async function measureAll(
  options: Options,
  corpora: Array<Omit<Corpus, 'files'> & { shards: number }>,
  results: PairResult[],
  writeReport: (status: string, extra: Record<string, unknown>) => void,
  jsonPath: string,
  against: QuernBuild | null,
): Promise<void> {
  for (const shape of options.shapes) {
    const corpus = prepareCorpus(options, shape);
    corpora.push({ shape, dir: corpus.dir, manifest: corpus.manifest, generated: corpus.generated, shards: corpus.files.length });
    await warmPageCache(corpus.files);
    for (const order of options.orders) {
      const runs = { this: [] as QuernResult[], against: [] as QuernResult[] };
      for (let repeat = 0; repeat < options.repeat; repeat++) {
        log(`${shape}, order ${order}: quern …`);
        // The first pair's jobs are kept until their counts are compared.
        const compare = against !== null && repeat === 0;
        const mine = await runQuern(corpus, order, options, THIS_BUILD, options.keep || compare);
        runs.this.push(mine);
        log(`  ${(mine.wallMs / 1000).toFixed(2)} s, peak RSS ${formatSize(mine.rssBytesMax)}, stages ${formatStages(mine.stageMs)}`);
        if (against === null) continue;
        log(`${shape}, order ${order}: quern ${against.name} …`);
        const theirs = await runQuern(corpus, order, options, against, options.keep || compare);
        runs.against.push(theirs);
        log(`  ${(theirs.wallMs / 1000).toFixed(2)} s, peak RSS ${formatSize(theirs.rssBytesMax)}, stages ${formatStages(theirs.stageMs)}`);
        if (compare) {
          const [a, b] = [quernJobDir(corpus, order, THIS_BUILD), quernJobDir(corpus, order, against)];
          const [digestA, digestB] = [await countsDigest(a, order), await countsDigest(b, order)];
          if (!options.keep) for (const dir of [a, b]) rmSync(dir, { recursive: true, force: true });
          if (digestA !== digestB) {
            writeReport('counts differ', { shape, order, against: against.name, digests: [digestA, digestB] });
            process.stderr.write(`\nbench-count: THIS CHECKOUT AND ${against.name} STORED DIFFERENT COUNTS (${shape}, order ${order}); the timings mean nothing\n`);
            process.exit(1);
          }
          log(`  counts identical to ${against.name}'s (digest ${digestA.slice(0, 16)})`);
        }
      }
      const quern = medianRun(runs.this);
      const pairRuns = against === null ? undefined : runs;
      if (options.skipPipeline) {
        results.push({ shape, order, tokens: corpus.manifest.tokens, quern, pipeline: null, ratio: null, targetRatio: TARGET_RATIOS[order] ?? null, targetMet: null, runs: pairRuns });
        continue;
      }
      log(`${shape}, order ${order}: pipeline …`);
      const pipeline = await runPipeline(corpus, order, options);
      log(`  ${(pipeline.wallMs / 1000).toFixed(2)} s, peak RSS ${formatSize(pipeline.rssBytesMax)}`);
      const differences = countDifferences(quern, pipeline, order, corpus);
      if (differences.length > 0) {
        writeReport('counts differ', { shape, order, differences, quern, pipeline });
        process.stderr.write(`\nbench-count: QUERN AND THE PIPELINE COUNTED DIFFERENT N-GRAMS (${shape}, order ${order}); the timings mean nothing:\n`);
        for (const line of differences) process.stderr.write(`  ${line}\n`);
        process.stderr.write(`  details in ${relative(REPO, jsonPath)}\n`);
        process.exit(1);
      }
      const ratio = quern.tokensPerSecond / pipeline.tokensPerSecond;
      const targetRatio = TARGET_RATIOS[order] ?? null;
      results.push({ shape, order, tokens: corpus.manifest.tokens, quern, pipeline, ratio, targetRatio, targetMet: targetRatio === null ? null : ratio >= targetRatio, runs: pairRuns });
    }
  }
}

async function main(): Promise<void> {
  const options = parseOptions(process.argv.slice(2));
  mkdirSync(WORK_DIR, { recursive: true });
  const startedAt = new Date();
  const jsonPath = join(BENCH_OUT, `bench-count-${startedAt.toISOString().replace(/[:.]/g, '-')}.json`);
  const results: PairResult[] = [];
  const corpora: Array<Omit<Corpus, 'files'> & { shards: number }> = [];
  const report = (status: string, extra: Record<string, unknown> = {}) => ({
    benchmark: 'scripts/bench-count.ts',
    status,
    startedAt: startedAt.toISOString(),
    finishedAt: new Date().toISOString(),
    options: { ...options, memory: formatSize(options.memoryBytes) },
    machine: { cpus: os.availableParallelism(), cpuModel: os.cpus()[0]?.model ?? null, totalMemoryBytes: os.totalmem(), platform: `${os.platform()} ${os.release()}` },
    tools: toolVersions(),
    commands: {
      quern: `node bin/quern.js count SHARDS --job FRESH_DIR --order N --workers ${options.workers} --memory ${options.memoryBytes} --quiet --json`,
      pipeline: PIPELINE_SCRIPT,
      awkProgram: AWK_PROGRAM,
    },
    rss: { processOverheadBytes: PROCESS_OVERHEAD_BYTES, workerOverheadBytes: WORKER_OVERHEAD_BYTES },
    targets: TARGET_RATIOS,
    corpora,
    results,
    ...extra,
  });

  const against = options.against === null ? null : againstBuild(options.against);
  try {
    await measureAll(options, corpora, results, (status, extra) => writeJson(jsonPath, report(status, extra)), jsonPath, against);
  } catch (error) {
    writeJson(jsonPath, report('failed', { error: (error as Error).message }));
    if (results.length > 0) printResults(results, options);
    process.stderr.write(`\nbench-count: ${(error as Error).message}\n  partial results in ${relative(REPO, jsonPath)}\n`);
    process.exit(1);
  }

  process.stdout.write(
    `quern count vs awk | sort -S ${formatSize(options.memoryBytes)} --parallel=${options.workers} | uniq -c, ${bytesIec.format(options.bytes)} corpus, ` +
      `--workers ${options.workers}, ${os.availableParallelism()} CPUs; counts agree for every run.\n`,
  );
  printResults(results, options);
  if (against !== null) {
    printAgainst(results, against.name);
    rmSync(against.cwd, { recursive: true, force: true });
  }
  const exceeded = results.filter((r) => !r.quern.withinBound);
  writeJson(jsonPath, report(exceeded.length > 0 ? 'rss bound exceeded' : 'ok'));
  process.stdout.write(`\nresults: ${relative(REPO, jsonPath)}\n`);
  if (exceeded.length > 0) {
    process.stderr.write(`bench-count: quern's peak RSS exceeded the documented bound in ${exceeded.length} run(s)\n`);
    process.exit(1);
  }
}

if (!existsSync('/usr/bin/time')) fail('GNU time (/usr/bin/time) is needed to measure peak RSS');
await main();
