/**
 * The count store: one LMDB environment per partition under job/counts.lmdb/, so partitions merge
 * in parallel (one writer per environment) and each partition stays an independent task.
 *
 * Keys: [order u8][word ids as big-endian u32 …] — LMDB's byte order is then (order, ids in
 * lexicographic order), the order of `quern ngrams`. An n-gram key names a block: the value holds
 * up to STORE_BLOCK_RECORDS n-grams starting with that one, coded and checksummed like a run-file
 * block (block-codec.ts). Keys starting with 0x00 hold metadata: the merge progress, written in the
 * same transaction as the counts it describes.
 */
import { readFileSync } from 'node:fs';
import * as path from 'node:path';
import { open, type RootDatabase } from 'lmdb';
import { assert, QuernError } from '../errors.ts';
import { STORE_ADDRESS_SPACE_MIN, STORE_BLOCK_RECORDS, STORE_MAP_BYTES } from '../limits.ts';
import { runUnstoppable } from '../job/stop-gate.ts';
import { compareRows, DecodeFailure, decodeBlockValue, type BlockBuffers, type DecodedBlock } from '../count/block-codec.ts';

export const STORE_DIR = 'counts.lmdb';
const META = 0x00;

/** Key spaces: the first key byte is the order plus one of these. */
export const KEY_SPACE = {
  /** Raw n-gram counts. */
  raw: 0x00,
  /** Continuation counts N1+(• x) of the n-grams x (orders below the highest). */
  continuation: 0x40,
} as const;
export type KeySpace = keyof typeof KEY_SPACE;

function progressKey(space: KeySpace): Buffer {
  return metaKey(`progress:${space}`);
}

/** The key of the metadata value `name` (below every n-gram key). */
export function metaKey(name: string): Buffer {
  return Buffer.from([META, ...Buffer.from(name, 'latin1')]);
}

/** Path of partition `p`'s environment, relative to the job directory. */
export function partitionStoreDir(partition: number): string {
  return path.join(STORE_DIR, `p${String(partition).padStart(4, '0')}`);
}

/** The store key of the n-gram `ids[offset .. offset+order)` in a key space. */
export function ngramKey(order: number, ids: ArrayLike<number>, offset = 0, space: KeySpace = 'raw'): Buffer {
  const key = Buffer.allocUnsafe(1 + 4 * order);
  key[0] = KEY_SPACE[space] + order;
  for (let k = 0; k < order; k++) key.writeUInt32BE(ids[offset + k], 1 + 4 * k);
  return key;
}

/** Decodes a store key into its order and ids. */
export function parseNgramKey(key: Uint8Array): { order: number; ids: Uint32Array } {
  const order = key[0] & 0x3f;
  const view = new DataView(key.buffer, key.byteOffset, key.byteLength);
  const ids = new Uint32Array(order);
  for (let k = 0; k < order; k++) ids[k] = view.getUint32(1 + 4 * k, false);
  return { order, ids };
}

/** The soft limit on this process's address space (`ulimit -v`) in bytes, from /proc/self/limits;
 *  undefined when there is none, or none can be read (not Linux). */
export function addressSpaceLimit(limits = readProcLimits()): number | undefined {
  const line = limits?.split('\n').find((l) => l.startsWith('Max address space'));
  const soft = line?.slice('Max address space'.length).trim().split(/\s+/)[0];
  return soft === undefined || soft === 'unlimited' || !/^\d+$/.test(soft) ? undefined : Number(soft);
}

function readProcLimits(): string | undefined {
  try {
    return readFileSync('/proc/self/limits', 'utf8');
  } catch {
    return undefined;
  }
}

/** This process's limit, read once (every store open checks it). */
let processLimit: { bytes: number | undefined } | undefined;

/** Throws a 'limit' QuernError when this process's address space is too small for the count store
 *  (STORE_ADDRESS_SPACE_MIN): LMDB would crash it instead of failing. */
export function checkStoreAddressSpace(limit = (processLimit ??= { bytes: addressSpaceLimit() }).bytes): void {
  if (limit !== undefined && limit < STORE_ADDRESS_SPACE_MIN) {
    throw new QuernError('limit', `the count store maps ${STORE_MAP_BYTES / 2 ** 40} TiB of address space per partition (LMDB, pages read as needed), and this process may use ${(limit / 2 ** 30).toFixed(1)} GiB of address space in all (ulimit -v): raise the limit, e.g. ulimit -v unlimited`);
  }
}

/**
 * Opens a partition's environment with every storage option stated. Through the thread's stop gate
 * (stop-gate.ts), like a commit: a worker ended by process.exit inside lmdb's native open aborted the
 * whole process ("napi_throw" while its isolate was terminating: 1 SIGTERM in the merge stage of
 * test/e2e/crash.test.ts in a CI run), instead of exiting with the signal's status.
 */
function openEnvironment(dir: string, readOnly: boolean): RootDatabase<Buffer, Buffer> {
  checkStoreAddressSpace();
  try {
    return runUnstoppable(() => open<Buffer, Buffer>({
      path: dir,
      keyEncoding: 'binary',
      encoding: 'binary',
      compression: false, // values are varint-coded blocks already
      mapSize: STORE_MAP_BYTES,
      noSync: false, // every commit is durable: progress recorded in it can be trusted
      overlappingSync: false,
      readOnly,
    }));
  } catch (cause) {
    throw new QuernError('io', `cannot open the count store ${dir}: ${(cause as Error).message}`, { cause });
  }
}

export class PartitionStore {
  private constructor(readonly dir: string, private readonly db: RootDatabase<Buffer, Buffer>) {}

  static open(dir: string, mode: 'read' | 'write'): PartitionStore {
    return new PartitionStore(dir, openEnvironment(dir, mode === 'read'));
  }

  /** The merge progress recorded with the last committed transaction, if any. */
  readProgress<T>(space: KeySpace = 'raw'): T | undefined {
    const value = this.db.getBinary(progressKey(space));
    if (value === undefined) return undefined;
    try {
      return JSON.parse(Buffer.from(value).toString('utf8')) as T;
    } catch (cause) {
      throw new QuernError('corrupt', `count store ${this.dir}: merge progress record is damaged`, { cause });
    }
  }

  /** A metadata value (its key starts with 0x00, `metaKey`), or undefined. */
  readMeta(key: Buffer): Uint8Array | undefined {
    assert(key[0] === META, 'a metadata key');
    return this.db.getBinary(key) ?? undefined;
  }

  /** Writes blocks (key, value), the progress record and any metadata values (keys from
   *  `metaKey`) in one synchronous, durable transaction; the blocks in LMDB's append mode unless
   *  `append` is false (their keys then need not be above every stored key). */
  commit(blocks: Array<[Buffer, Buffer]>, progress: unknown, space: KeySpace = 'raw', meta: Array<[Buffer, Uint8Array]> = [], append = true): void {
    const progressValue = Buffer.from(JSON.stringify(progress), 'utf8');
    // Blocks come in key order, and the continuation space (first byte 0x41..) is written after
    // the raw space (0x01..0x07) is complete, so every block key is above all stored n-gram keys:
    // LMDB's append mode applies (metadata keys start with 0x00, below every n-gram key) — except
    // for the continuation orders written below those the raw merge made (fused-continuation.ts).
    // A worker must not be terminated inside the transaction (stop-gate.ts): it would never end.
    runUnstoppable(() => this.db.transactionSync(() => {
      for (const [key, value] of blocks) this.db.putSync(key, value, { append });
      this.db.putSync(progressKey(space), progressValue);
      for (const [key, value] of meta) this.db.putSync(key, Buffer.from(value.buffer, value.byteOffset, value.byteLength));
    }));
  }

  /** Decodes the block stored under `key`, naming the store in errors. */
  private decode(key: Uint8Array, value: Uint8Array, into?: BlockBuffers): DecodedBlock {
    const { order, ids } = parseNgramKey(key);
    try {
      const block = decodeBlockValue(value, order, STORE_BLOCK_RECORDS, into);
      if (compareRows(block.keys, 0, ids, 0, order) !== 0) throw new DecodeFailure(0, 'first n-gram differs from its key');
      return block;
    } catch (failure) {
      if (!(failure instanceof DecodeFailure)) throw failure;
      throw new QuernError('corrupt', `count store ${this.dir}: block of order ${order} at [${ids.join(' ')}]: ${failure.reason}`);
    }
  }

  /** Count of the n-gram `ids` (of length `order`), 0 when it was never seen. */
  lookup(order: number, ids: ArrayLike<number>, space: KeySpace = 'raw'): number {
    const target = ngramKey(order, ids, 0, space);
    for (const { key, value } of this.db.getRange({ start: target, reverse: true, limit: 1 })) {
      if (key[0] !== target[0]) return 0;
      const block = this.decode(key, value);
      const probe = Uint32Array.from(ids as ArrayLike<number>);
      let low = 0;
      let high = block.recordCount - 1;
      while (low <= high) {
        const mid = (low + high) >> 1;
        const c = compareRows(block.keys, mid * order, probe, 0, order);
        if (c === 0) return block.counts[mid];
        if (c < 0) low = mid + 1;
        else high = mid - 1;
      }
    }
    return 0;
  }

  /**
   * The blocks of one order, in key order, starting with the block that may hold `from` (an n-gram
   * prefix, possibly shorter than the order) — all blocks of the order when `from` is absent.
   * With `reuse`, every block is decoded into the same arrays (no allocation per block): a block is
   * valid only until the next one is asked for.
   */
  *blocks(order: number, from?: ArrayLike<number>, space: KeySpace = 'raw', reuse = false): Generator<DecodedBlock> {
    const into: BlockBuffers | undefined = reuse ? { keys: new Uint32Array(0), counts: new Float64Array(0) } : undefined;
    const first = KEY_SPACE[space] + order;
    let start = Buffer.from([first]);
    if (from !== undefined && from.length > 0) {
      const probe = ngramKey(from.length, from, 0, space);
      probe[0] = first;
      for (const { key } of this.db.getRange({ start: probe, reverse: true, limit: 1 })) if (key[0] === first) start = Buffer.from(key);
    }
    const end = Buffer.from([first + 1]);
    for (const { key, value } of this.db.getRange({ start, end })) {
      assert(key[0] === first, 'range stays within the order');
      yield this.decode(key, value, into);
    }
  }

  close(): Promise<void> {
    return this.db.close();
  }
}

/**
 * One partition's n-grams of one order as a BatchSource for mergeRuns, optionally limited to those
 * starting with `prefix`.
 */
export class StoreSource {
  private readonly iterator: Generator<DecodedBlock>;
  private ended = false;

  /** `reuseBatches`: each batch is decoded into the same arrays, valid until the next `nextBatch`
   *  (for readers that copy a batch out before asking for the next, as the estimate does). */
  constructor(private readonly store: PartitionStore, readonly order: number, private readonly prefix?: Uint32Array, space: KeySpace = 'raw', reuseBatches = false) {
    this.iterator = store.blocks(order, prefix, space, reuseBatches);
  }

  get name(): string {
    return this.store.dir;
  }

  async nextBatch(): Promise<{ keys: Uint32Array; counts: Float64Array; recordCount: number } | null> {
    const prefix = this.prefix;
    while (!this.ended) {
      const step = this.iterator.next();
      if (step.done) break;
      const block = step.value;
      if (prefix === undefined || prefix.length === 0) return block;
      // Keep the rows that start with the prefix; rows past it end the source.
      const order = this.order;
      let first = -1;
      let end = block.recordCount;
      for (let j = 0; j < block.recordCount; j++) {
        const c = compareRows(block.keys, j * order, prefix, 0, prefix.length);
        if (c < 0) continue;
        if (c > 0) { end = j; this.ended = true; break; }
        if (first < 0) first = j;
      }
      if (first >= 0 && end > first) {
        return { keys: block.keys.slice(first * order, end * order), counts: block.counts.slice(first, end), recordCount: end - first };
      }
    }
    this.ended = true;
    return null;
  }

  async close(): Promise<void> {
    this.iterator.return(undefined);
  }
}
