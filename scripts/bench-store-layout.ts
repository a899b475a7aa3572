/**
 * Measures the count-store layout choice (DEVELOPERS.md, "The count store"): one LMDB environment
 * per partition, written by two worker threads at once, against one environment with a named
 * database per partition, which LMDB lets only one writer fill at a time. Same blocks, same
 * transactions (1,024 blocks of 1,024 trigrams each), same storage options; printed as a ratio.
 *
 *   npx tsx scripts/bench-store-layout.ts [--ngrams 16000000] [--partitions 16]
 */
import { mkdtempSync, rmSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { parseArgs } from 'node:util';
import { isMainThread, parentPort, Worker, workerData } from 'node:worker_threads';
import { open, type Database } from 'lmdb';
import { encodeBlockValue } from '../src/count/block-codec.ts';
import { ngramKey } from '../src/merge/store.ts';
import { STORE_BLOCK_RECORDS, STORE_MAP_BYTES, STORE_TXN_BLOCKS } from '../src/limits.ts';

const ORDER = 3;

/** The sorted blocks of one partition: trigrams with small, increasing ids and Zipf-like counts. */
function* partitionBlocks(partition: number, ngrams: number): Generator<[Buffer, Buffer]> {
  const keys = new Uint32Array(STORE_BLOCK_RECORDS * ORDER);
  const counts = new Float64Array(STORE_BLOCK_RECORDS);
  let a = partition;
  let b = 0;
  let c = 0;
  let filled = 0;
  for (let i = 0; i < ngrams; i++) {
    c += 1 + (i % 7);
    if (c > 200_000) { c = 0; b += 1 + (i % 3); }
    if (b > 50_000) { b = 0; a += 16; }
    keys[filled * ORDER] = a; keys[filled * ORDER + 1] = b; keys[filled * ORDER + 2] = c;
    counts[filled] = 1 + ((i * 2654435761) % 97 === 0 ? 50 : i % 3);
    if (++filled === STORE_BLOCK_RECORDS) {
      yield [ngramKey(ORDER, keys, 0), encodeBlockValue(keys, counts, 0, filled, ORDER)];
      filled = 0;
    }
  }
  if (filled > 0) yield [ngramKey(ORDER, keys, 0), encodeBlockValue(keys, counts, 0, filled, ORDER)];
}

const storageOptions = { keyEncoding: 'binary', encoding: 'binary', compression: false, mapSize: STORE_MAP_BYTES, noSync: false, overlappingSync: false } as const;

/** Writes one partition's blocks into `db` in transactions of STORE_TXN_BLOCKS blocks. */
function writePartition(db: Database<Buffer, Buffer>, partition: number, ngrams: number): void {
  let batch: Array<[Buffer, Buffer]> = [];
  const commit = (): void => {
    db.transactionSync(() => { for (const [k, v] of batch) db.putSync(k, v, { append: true }); });
    batch = [];
  };
  for (const entry of partitionBlocks(partition, ngrams)) {
    batch.push(entry);
    if (batch.length === STORE_TXN_BLOCKS) commit();
  }
  if (batch.length > 0) commit();
}

if (!isMainThread) {
  const { dir, partitions, ngrams } = workerData as { dir: string; partitions: number[]; ngrams: number };
  for (const p of partitions) {
    const db = open<Buffer, Buffer>({ path: path.join(dir, `p${p}`), ...storageOptions });
    writePartition(db, p, ngrams);
    await db.close();
  }
  parentPort!.postMessage('done');
} else {
  const { values } = parseArgs({ options: { ngrams: { type: 'string', default: '16000000' }, partitions: { type: 'string', default: '16' } } });
  const ngramsTotal = Number(values.ngrams);
  const partitions = Number(values.partitions);
  const perPartition = Math.ceil(ngramsTotal / partitions);
  const root = mkdtempSync(path.join(os.tmpdir(), 'quern-bench-store-'));

  // (a) one environment per partition, two writer threads
  const startA = performance.now();
  await Promise.all([0, 1].map((w) => new Promise<void>((resolve, reject) => {
    const mine = Array.from({ length: partitions }, (_, p) => p).filter((p) => p % 2 === w);
    const boot = new URL('../src/count/worker-boot.mjs', import.meta.url);
    const worker = new Worker(boot, { workerData: { module: import.meta.url, dir: path.join(root, 'a'), partitions: mine, ngrams: perPartition } });
    worker.once('message', () => resolve());
    worker.once('error', reject);
  })));
  const msA = performance.now() - startA;

  // (b) one environment, a named database per partition, one writer
  const startB = performance.now();
  const env = open<Buffer, Buffer>({ path: path.join(root, 'b'), maxDbs: partitions + 1, ...storageOptions });
  for (let p = 0; p < partitions; p++) writePartition(env.openDB<Buffer, Buffer>({ name: `p${p}`, ...storageOptions }), p, perPartition);
  await env.close();
  const msB = performance.now() - startB;

  const rate = (ms: number): string => `${(ngramsTotal / ms / 1000).toFixed(2)} M n-grams/s`;
  console.log(`n-grams: ${ngramsTotal} trigrams in ${partitions} partitions, blocks of ${STORE_BLOCK_RECORDS}, transactions of ${STORE_TXN_BLOCKS} blocks`);
  console.log(`(a) environment per partition, 2 writer threads : ${(msA / 1000).toFixed(2)} s  ${rate(msA)}`);
  console.log(`(b) one environment, named databases, 1 writer  : ${(msB / 1000).toFixed(2)} s  ${rate(msB)}`);
  console.log(`ratio (b)/(a) wall time: ${(msB / msA).toFixed(2)}×`);
  rmSync(root, { recursive: true, force: true });
}
