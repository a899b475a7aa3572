/**
 * Writes a seeded synthetic benchmark corpus (see scripts/lib/synthetic.ts for the model).
 *
 *   npx tsx scripts/gen-corpus.ts --bytes 200MB --out DIR [--shards K | --shape few-large|many-small]
 *                                 [--seed S] [--vocabulary-types N] [--overwrite]
 *
 * --bytes      total size of all shards together (exact); units as in "200MB", "1GB", "1GiB"
 * --shards     number of shards (default 1); --shape few-large = 2 shards, many-small = 200
 * --seed       any integer (default 1); the same options give byte-identical shards
 * --overwrite  allow a non-empty DIR: its shard-*.txt files and .gen-corpus.json are replaced
 *
 * Shards are DIR/shard-00000.txt, ...; DIR/.gen-corpus.json records the options and the per-shard
 * sizes, sentences and tokens, so a benchmark can tell whether an existing corpus is the one it
 * wants. A summary is printed as one JSON line on stdout.
 */
import bytesIec from 'bytes-iec';
import { mkdirSync, readdirSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { parseArgs } from 'node:util';
import { SHAPE_SHARDS, SyntheticModel, shardBytes, shardName, writeShardFile, type CorpusShape, type ShardResult } from './lib/synthetic.ts';

const MANIFEST_NAME = '.gen-corpus.json';
const SHARDS_MAX = 100_000;

function fail(message: string): never {
  process.stderr.write(`gen-corpus: ${message}\n`);
  process.exit(2);
}

function parseOptions(argv: string[]) {
  let parsed;
  try {
    parsed = parseArgs({
      args: argv,
      strict: true,
      options: {
        bytes: { type: 'string' },
        out: { type: 'string' },
        shards: { type: 'string' },
        shape: { type: 'string' },
        seed: { type: 'string', default: '1' },
        'vocabulary-types': { type: 'string', default: '200000' },
        overwrite: { type: 'boolean', default: false },
      },
    });
  } catch (error) {
    fail((error as Error).message);
  }
  const v = parsed.values;
  if (v.bytes === undefined) fail('--bytes is required (e.g. --bytes 200MB)');
  if (v.out === undefined) fail('--out is required');
  const bytes = bytesIec.parse(v.bytes);
  if (bytes === null || !Number.isFinite(bytes) || bytes < 0) fail(`--bytes: not a size: ${v.bytes}`);

  let shards = 1;
  if (v.shape !== undefined) {
    if (!(v.shape in SHAPE_SHARDS)) fail(`--shape must be few-large or many-small, got ${v.shape}`);
    shards = SHAPE_SHARDS[v.shape as CorpusShape];
  }
  if (v.shards !== undefined) {
    const count = Number(v.shards);
    if (!Number.isInteger(count) || count < 1 || count > SHARDS_MAX) fail(`--shards must be an integer in [1, ${SHARDS_MAX}], got ${v.shards}`);
    if (v.shape !== undefined && count !== shards) fail(`--shards ${count} contradicts --shape ${v.shape} (${shards} shards)`);
    shards = count;
  }
  const seed = Number(v.seed);
  if (!Number.isSafeInteger(seed)) fail(`--seed must be an integer, got ${v.seed}`);
  const vocabularyTypes = Number(v['vocabulary-types']);
  if (!Number.isInteger(vocabularyTypes) || vocabularyTypes < 10 || vocabularyTypes > 2_000_000) {
    fail(`--vocabulary-types must be an integer in [10, 2000000], got ${v['vocabulary-types']}`);
  }
  return { bytes: Math.floor(bytes), out: resolve(v.out), shards, seed, vocabularyTypes, overwrite: v.overwrite === true, shape: v.shape ?? null };
}

function prepareOutDir(out: string, overwrite: boolean): void {
  mkdirSync(out, { recursive: true });
  const entries = readdirSync(out);
  if (entries.length === 0) return;
  if (!overwrite) fail(`${out} is not empty (use --overwrite to replace an earlier corpus there)`);
  const ours = /^shard-\d{5}\.txt(\.tmp)?$/;
  for (const name of entries) {
    if (name === MANIFEST_NAME || ours.test(name)) rmSync(join(out, name));
  }
}

function main(): void {
  const options = parseOptions(process.argv.slice(2));
  prepareOutDir(options.out, options.overwrite);

  const startedMs = performance.now();
  const model = new SyntheticModel({ seed: options.seed, vocabularyTypes: options.vocabularyTypes });
  const modelMs = performance.now() - startedMs;

  const results: ShardResult[] = [];
  for (let index = 0; index < options.shards; index++) {
    const bytes = shardBytes(options.bytes, options.shards, index);
    results.push(writeShardFile(model, index, bytes, join(options.out, shardName(index))));
  }
  const elapsedMs = performance.now() - startedMs;

  const totals = results.reduce(
    (sum, r) => ({ bytes: sum.bytes + r.bytes, sentences: sum.sentences + r.sentences, tokens: sum.tokens + r.tokens }),
    { bytes: 0, sentences: 0, tokens: 0 },
  );
  if (totals.bytes !== options.bytes) throw new Error(`wrote ${totals.bytes} bytes, wanted ${options.bytes}`);

  const manifest = {
    generator: 'scripts/gen-corpus.ts',
    seed: options.seed,
    vocabularyTypes: options.vocabularyTypes,
    shape: options.shape,
    shardCount: options.shards,
    ...totals,
    shards: results.map((r, index) => ({ name: shardName(index), bytes: r.bytes, sentences: r.sentences, tokens: r.tokens })),
  };
  const manifestPath = join(options.out, MANIFEST_NAME);
  writeFileSync(`${manifestPath}.tmp`, JSON.stringify(manifest, null, 2) + '\n');
  renameSync(`${manifestPath}.tmp`, manifestPath);

  const summary = {
    out: options.out,
    shards: options.shards,
    ...totals,
    modelMs: Math.round(modelMs),
    elapsedMs: Math.round(elapsedMs),
    megabytesPerSecond: Math.round(totals.bytes / 1e6 / (elapsedMs / 1000)),
  };
  process.stdout.write(JSON.stringify(summary) + '\n');
}

main();
