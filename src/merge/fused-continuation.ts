/**
 * Continuation counts of orders 2 … N−1 made by the raw merge itself, from the rows it merges.
 *
 * The local continuation counts of order m (local-continuation.ts) come from the partition's
 * n-grams of order m+1, which the continuation stage otherwise reads back from the store and
 * decodes. The raw merge has those rows in hand as it merges them: it cuts their suffixes into a
 * growable WebAssembly memory batch by batch (`SuffixGather`), and once the order is merged sorts
 * and counts them there (the same passes as local-continuation.ts), encodes the store blocks of
 * order m in the continuation key space, and keeps them with their tally. They are written with
 * the commit that finishes the partition's last order (their keys, 0x42 and up, are above every
 * raw key, so LMDB's append mode still applies), beside a metadata value naming the orders and
 * their tallies (FUSED_CONTINUATION_KEY). The continuation stage then skips those orders.
 *
 * Memory: the gather holds 2 · n · m + n words for n rows of order m+1, the blocks kept about the
 * size of their store entries; both together stay within the task's `bytesMax`. An order that
 * would pass it is dropped (the continuation stage computes it as before), as is every order
 * merged before a stop: a resumed merge keeps only the orders it merged in full.
 */
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import { encodeBlockValue } from '../count/block-codec.ts';
import { WasmSorter } from '../count/sort-wasm.ts';
import { STORE_BLOCK_RECORDS } from '../limits.ts';
import { metaKey, ngramKey, PartitionStore, partitionStoreDir } from './store.ts';
import { countSortedSuffixes } from './local-continuation.ts';
import { TallyBuilder, type OrderTally } from './tally.ts';

/** The metadata value: JSON { version, orders, tallies } (tallies[i] is orders[i]'s). */
export const FUSED_CONTINUATION_KEY = metaKey('fused-continuation:1');
const FUSED_VERSION = 1;

/** Words a gather starts with (4 MiB), doubled as rows come. */
const GATHER_WORDS_FIRST = 1 << 20;

interface FusedValue {
  version: number;
  orders: number[];
  tallies: OrderTally[];
}

/** The suffixes (last m ids) of the rows of order m+1 one merge streams, cut in a WebAssembly
 *  memory as they come; null once over the budget or without such a memory. */
export class SuffixGather {
  private sorter: WasmSorter | null;
  private rows = 0;
  private idBitsAll = 0;

  constructor(readonly order: number, private readonly bytesMax: number) {
    assert(order >= 2, 'fused continuation counts start at order 2');
    const sorter = 4 * GATHER_WORDS_FIRST <= bytesMax ? WasmSorter.create(GATHER_WORDS_FIRST, true) : null;
    this.sorter = sorter instanceof WasmSorter ? sorter : null;
  }

  get alive(): boolean {
    return this.sorter !== null;
  }

  /** Takes the suffixes of `rows` rows of order+1 ids (row-major in `keys`). */
  add(keys: Uint32Array, rows: number): void {
    const sorter = this.sorter;
    if (sorter === null || rows === 0) return;
    const m = this.order;
    // takeSuffixes copies the rows in whole first: `rows` words past the suffixes must be free.
    const needed = (this.rows + rows) * m + rows;
    if (needed > sorter.words.length && !this.grow(Math.max(needed, 2 * sorter.words.length))) return;
    this.idBitsAll |= sorter.takeSuffixes(keys, rows, m, this.rows * m);
    this.rows += rows;
  }

  private grow(words: number): boolean {
    if (4 * words > this.bytesMax || !this.sorter!.reserve(words)) {
      this.sorter = null;
      return false;
    }
    return true;
  }

  /**
   * The continuation counts of order m from the rows taken: the store blocks of the continuation
   * space and their tally (`distinct` rows of order m+1, as the merge counted them), or null when
   * the gather was dropped. The memory is let go either way.
   */
  finish(distinct: number): { blocks: Array<[Buffer, Buffer]>; tally: OrderTally; bytes: number } | null {
    const sorter = this.sorter;
    this.sorter = null;
    if (sorter === null) return null;
    const n = this.rows;
    const m = this.order;
    assert(n === distinct, `the gather of order ${m + 1} took ${n} rows, the merge counted ${distinct}`);
    const words = 2 * n * m + n;
    if (4 * words > this.bytesMax || !sorter.reserve(words)) return null;
    const { keys, counts, size } = countSortedSuffixes(sorter, n, m, this.idBitsAll);
    const tally = new TallyBuilder(m);
    const blocks: Array<[Buffer, Buffer]> = [];
    let bytes = 0;
    for (let j = 0; j < size; j += STORE_BLOCK_RECORDS) {
      const take = Math.min(STORE_BLOCK_RECORDS, size - j);
      tally.addRows(keys, counts, j, j + take);
      const block: [Buffer, Buffer] = [ngramKey(m, keys, j * m, 'continuation'), encodeBlockValue(keys, counts, j, take, m)];
      bytes += block[0].length + block[1].length;
      blocks.push(block);
    }
    return { blocks, tally: tally.finish(), bytes };
  }
}

/**
 * What one raw merge of a partition made of its continuation counts: the orders' blocks and
 * tallies, kept within `bytesMax` (with the gather of the order being merged).
 */
export class FusedContinuation {
  private readonly orders = new Map<number, { blocks: Array<[Buffer, Buffer]>; tally: OrderTally }>();
  private heldBytes = 0;

  constructor(private readonly bytesMax: number, private readonly orderMax: number) {}

  /** A gather for the raw merge of order `order` (its suffixes give order − 1), or undefined. */
  gatherFor(order: number): SuffixGather | undefined {
    if (order < 3 || order > this.orderMax) return undefined;
    const gather = new SuffixGather(order - 1, this.bytesMax - this.heldBytes);
    return gather.alive ? gather : undefined;
  }

  /** Keeps what `gather` made of the `distinct` rows merged, when it was not dropped. */
  keep(gather: SuffixGather, distinct: number): void {
    const made = gather.finish(distinct);
    if (made === null) return;
    this.orders.set(gather.order, { blocks: made.blocks, tally: made.tally });
    this.heldBytes += made.bytes;
  }

  /** The blocks of every order kept, in key order (orders ascending). */
  blocks(): Array<[Buffer, Buffer]> {
    return [...this.orders.keys()].sort((a, b) => a - b).flatMap((m) => this.orders.get(m)!.blocks);
  }

  /** The metadata value naming the orders kept and their tallies (none: no value). */
  meta(): Array<[Buffer, Uint8Array]> {
    if (this.orders.size === 0) return [];
    const orders = [...this.orders.keys()].sort((a, b) => a - b);
    const value: FusedValue = { version: FUSED_VERSION, orders, tallies: orders.map((m) => this.orders.get(m)!.tally) };
    return [[FUSED_CONTINUATION_KEY, Buffer.from(JSON.stringify(value), 'utf8')]];
  }
}

/** The continuation orders a store holds from its raw merge, with their tallies (by order). */
export function readFusedContinuation(store: PartitionStore): Map<number, OrderTally> {
  const value = store.readMeta(FUSED_CONTINUATION_KEY);
  const fused = new Map<number, OrderTally>();
  if (value === undefined) return fused;
  let parsed: FusedValue;
  try {
    parsed = JSON.parse(Buffer.from(value.buffer, value.byteOffset, value.byteLength).toString('utf8')) as FusedValue;
  } catch (cause) {
    throw new QuernError('corrupt', `count store ${store.dir}: its fused continuation record is not JSON (${(cause as Error).message}); re-run with --restart`);
  }
  if (parsed.version !== FUSED_VERSION || !Array.isArray(parsed.orders) || !Array.isArray(parsed.tallies) || parsed.orders.length !== parsed.tallies.length) {
    throw new QuernError('corrupt', `count store ${store.dir}: its fused continuation record is not of version ${FUSED_VERSION}; re-run with --restart`);
  }
  parsed.orders.forEach((m, i) => fused.set(m, parsed.tallies[i]));
  return fused;
}

/** The continuation orders partition `partition`'s raw merge made (main thread, between stages). */
export async function fusedOrders(jobDir: string, partition: number): Promise<Set<number>> {
  const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(partition)), 'read');
  try {
    return new Set(readFusedContinuation(store).keys());
  } finally {
    await store.close();
  }
}
