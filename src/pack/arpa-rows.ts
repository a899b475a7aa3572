/**
 * The n-grams of an ARPA file, one order at a time, sorted into id order on disk within a memory
 * budget: what lets `quern pack` read an ARPA file of any size (arpa.ts, `openArpaSource`).
 *
 * An ARPA file lists each order's n-grams in an order of its own (often by their words' spelling),
 * and a model file wants them by ids. So the rows of an order are gathered in a buffer of at most
 * `budgetBytes`; a full buffer is sorted (LSD radix sort over the ids) and written out as a run, and
 * at the order's end the runs are merged into one file. Rows that arrive in ascending order already
 * (a file Quern wrote) skip both: they are appended to one run a few blocks at a time as they come
 * (ARPA_ASCENDING_FLUSH_ROWS), so only the start of the buffer is ever used, and an order that is
 * one run needs no merge. Two equal n-grams meet in the sort or the merge and stop the read
 * with both lines; so does an n-gram whose context (its first n − 1 words) is not an n-gram of the
 * order below, found by walking the two orders' files in step.
 *
 * Files are spools (spool.ts) of blocks of ARPA_BLOCK_ROWS rows, every block the same size (the
 * last one padded):
 *
 *   ids (rows × n u32) | lines (rows u32) | log10 p (rows f64) | log10 back-off (rows f64)
 *
 * with ARPA_BLOCK_ROWS even, so that the f64 fields are 8-byte aligned and a block's fields are read
 * as typed-array views.
 */
import { assert, QuernError } from '../errors.ts';
import { ARPA_ASCENDING_FLUSH_ROWS, ARPA_BLOCK_ROWS, ARPA_SORT_ROWS_MIN } from '../limits.ts';
import { sortRowsByColumns } from '../count/radix.ts';
import { compareRows } from '../count/block-codec.ts';
import type { Spool } from './spool.ts';

/** Makes the spool named `name` for order n. */
export type ArpaSpoolMaker = (n: number, name: string) => Promise<Spool>;

/** What the sorter reports through: the n-gram's words, and an error at a line of the file. */
export interface ArpaRowsContext {
  ngramText(ids: Uint32Array, at: number, n: number): string;
  error(message: string, line: number): QuernError;
}

/** Digits of the radix sort: 8 bits (256 counters, in the L1 cache; three passes per id column
 *  for vocabularies up to 2^24 words). */
const SORT_DIGIT_BITS = 8;

/** Bytes of one block of order n. */
export function blockBytes(n: number): number {
  return ARPA_BLOCK_ROWS * (4 * n + 4 + 16);
}

/** Bytes a row of order n takes in the sort buffer: ids and its index twice (rows and spare), the
 *  two values and the line. */
export function sortRowBytes(n: number): number {
  return 2 * 4 * (n + 1) + 8 + 8 + 4;
}

/** One block's fields, as views of its bytes. */
interface Block {
  ids: Uint32Array;
  lines: Uint32Array;
  prob: Float64Array;
  backOff: Float64Array;
}

function blockViews(bytes: Uint8Array, at: number, n: number): Block {
  const buffer = bytes.buffer;
  const base = bytes.byteOffset + at;
  assert(base % 8 === 0, 'blocks are 8-byte aligned');
  const rows = ARPA_BLOCK_ROWS;
  return {
    ids: new Uint32Array(buffer, base, rows * n),
    lines: new Uint32Array(buffer, base + rows * n * 4, rows),
    prob: new Float64Array(buffer, base + rows * (n + 1) * 4, rows),
    backOff: new Float64Array(buffer, base + rows * (n + 1) * 4 + rows * 8, rows),
  };
}

/** Writes rows of order n into a spool, block by block. */
class BlockWriter {
  rows = 0;
  private readonly bytes: Uint8Array;
  private readonly block: Block;
  private filled = 0;

  constructor(private readonly spool: Spool, private readonly n: number) {
    this.bytes = new Uint8Array(blockBytes(n));
    this.block = blockViews(this.bytes, 0, n);
  }

  /** Adds the row whose ids are `ids[at .. at+n)`; returns true when the block is full, which the
   *  caller then writes (`flush`) before adding more. (Synchronous, so that a row costs no await.) */
  add(ids: Uint32Array, at: number, line: number, prob: number, backOff: number): boolean {
    assert(this.filled < ARPA_BLOCK_ROWS, 'a full block is written before the next row');
    const n = this.n;
    const row = this.filled++;
    for (let i = 0; i < n; i++) this.block.ids[row * n + i] = ids[at + i];
    this.block.lines[row] = line;
    this.block.prob[row] = prob;
    this.block.backOff[row] = backOff;
    this.rows++;
    return this.filled === ARPA_BLOCK_ROWS;
  }

  /** Writes the full block. */
  async flush(): Promise<void> {
    await this.spool.write(this.bytes);
    this.filled = 0;
  }

  /** Writes a partial last block: its rows, then zeros. */
  async end(): Promise<void> {
    if (this.filled > 0) {
      const n = this.n;
      const filled = this.filled;
      this.block.ids.fill(0, filled * n);
      this.block.lines.fill(0, filled);
      this.block.prob.fill(0, filled);
      this.block.backOff.fill(0, filled);
      await this.flush();
    }
    await this.spool.close();
  }
}

/** A sorted file of order n's rows, as the sorter leaves it. */
export interface ArpaRowsFile {
  n: number;
  rows: number;
  spool: Spool;
}

/** The rows of `file` in blocks: `rows` valid rows of each block's views (overwritten by the next). */
export async function* readBlocks(file: ArpaRowsFile, blocksPerRead = 4): AsyncGenerator<Block & { rows: number }> {
  const unit = blockBytes(file.n);
  let left = file.rows;
  for await (const piece of file.spool.read(unit, unit * blocksPerRead)) {
    for (let at = 0; at < piece.length; at += unit) {
      const rows = Math.min(ARPA_BLOCK_ROWS, left);
      if (rows <= 0) return;
      left -= rows;
      yield { ...blockViews(piece, at, file.n), rows };
    }
  }
  assert(left === 0, 'a rows file holds its rows');
}

/** A cursor on one file's rows, for the merge and the context walk. */
class RowCursor {
  block: (Block & { rows: number }) | null = null;
  row = 0;
  private readonly blocks: AsyncGenerator<Block & { rows: number }>;

  constructor(file: ArpaRowsFile) {
    this.blocks = readBlocks(file, 1);
  }

  /** Moves to the next row of the block: false when the block has no more (then call `next`). */
  step(): boolean {
    if (this.block !== null && this.row + 1 < this.block.rows) {
      this.row++;
      return true;
    }
    return false;
  }

  /** Moves to the next row, reading the next block when this one is done; false at the end. */
  async next(): Promise<boolean> {
    if (this.block !== null && ++this.row < this.block.rows) return true;
    const next = await this.blocks.next();
    if (next.done) {
      this.block = null;
      return false;
    }
    this.block = next.value;
    this.row = 0;
    return true;
  }

  async close(): Promise<void> {
    await this.blocks.return(undefined);
  }
}

/**
 * The rows of one order as they are read: `add` them (while `full` is false), `flush` when full,
 * and `finish` at the order's end for the sorted, checked file.
 */
export class ArpaOrderRows {
  /** Rows added so far. */
  count = 0;
  private readonly capacity: number;
  private readonly stride: number;
  private rows: Uint32Array;
  private spare: Uint32Array;
  private readonly prob: Float64Array;
  private readonly backOff: Float64Array;
  private readonly lines: Uint32Array;
  private buffered = 0;
  /** Whether every row so far came after the one before it. */
  private ascending = true;
  private readonly last: Uint32Array;
  /** The columns of a buffered row that hold its ids (the last holds its index). */
  private readonly idColumns: number[];
  /** The run the ascending buffers are appended to, while they are. */
  private direct: BlockWriter | null = null;
  private directFile: ArpaRowsFile | null = null;
  private readonly runs: ArpaRowsFile[] = [];

  constructor(
    readonly n: number, budgetBytes: number,
    private readonly makeSpool: ArpaSpoolMaker, private readonly context: ArpaRowsContext,
  ) {
    assert(n >= 2, 'orders 2 and up are sorted on disk');
    this.capacity = Math.max(ARPA_SORT_ROWS_MIN, Math.floor(budgetBytes / sortRowBytes(n)));
    this.stride = n + 1;
    this.rows = new Uint32Array(this.capacity * this.stride);
    this.spare = new Uint32Array(this.capacity * this.stride);
    this.prob = new Float64Array(this.capacity);
    this.backOff = new Float64Array(this.capacity);
    this.lines = new Uint32Array(this.capacity);
    this.last = new Uint32Array(n);
    this.idColumns = Array.from({ length: n }, (_, i) => i);
  }

  /** The buffer is to be written out (`flush`) before more rows are added: it is full, or it holds
   *  ARPA_ASCENDING_FLUSH_ROWS rows that all came in order, which go straight to the run. */
  get full(): boolean {
    return this.buffered === this.capacity || (this.ascending && this.buffered >= ARPA_ASCENDING_FLUSH_ROWS);
  }

  add(ids: Uint32Array, prob: number, backOff: number, line: number): void {
    assert(this.buffered < this.capacity, 'rows are added while the buffer has room');
    const n = this.n;
    if (this.ascending && this.count > 0 && compareRows(this.last, 0, ids, 0, n) >= 0) this.ascending = false;
    if (this.ascending) this.last.set(ids.subarray(0, n));
    const row = this.buffered++;
    const base = row * this.stride;
    for (let i = 0; i < n; i++) this.rows[base + i] = ids[i];
    this.rows[base + n] = row;
    this.prob[row] = prob;
    this.backOff[row] = backOff;
    this.lines[row] = line;
    this.count++;
  }

  /** Writes the buffered rows out: appended to the ascending run, or sorted as a run of their own. */
  async flush(): Promise<void> {
    if (this.buffered === 0) return;
    const n = this.n;
    const stride = this.stride;
    if (this.ascending) {
      if (this.direct === null) {
        const spool = await this.makeSpool(n, 'r0');
        this.direct = new BlockWriter(spool, n);
        this.directFile = { n, rows: 0, spool };
      }
      const direct = this.direct;
      for (let row = 0; row < this.buffered; row++) if (direct.add(this.rows, row * stride, this.lines[row], this.prob[row], this.backOff[row])) await direct.flush();
      this.buffered = 0;
      return;
    }
    this.sort();
    const spool = await this.makeSpool(n, `r${this.runs.length + 1}`);
    const file: ArpaRowsFile = { n, rows: this.buffered, spool };
    this.runs.push(file);
    const writer = new BlockWriter(spool, n);
    for (let i = 0; i < this.buffered; i++) {
      const base = i * stride;
      const row = this.rows[base + n];
      if (i > 0 && compareRows(this.rows, base - stride, this.rows, base, n) === 0) {
        this.duplicate(this.rows, base, Math.max(this.lines[row], this.lines[this.rows[base - stride + n]]));
      }
      if (writer.add(this.rows, base, this.lines[row], this.prob[row], this.backOff[row])) await writer.flush();
    }
    await writer.end();
    this.buffered = 0;
  }

  /**
   * Ends the order: the rest is flushed and the runs are merged into one sorted file of distinct
   * n-grams, whose contexts are then checked against `below` (the sorted file of order n − 1;
   * null for order 2, whose contexts are unigrams, all present).
   */
  async finish(below: ArpaRowsFile | null): Promise<ArpaRowsFile> {
    await this.flush();
    this.rows = this.spare = new Uint32Array(0);
    const runs = [...this.runs];
    if (this.direct !== null) {
      await this.direct.end();
      (this.directFile as ArpaRowsFile).rows = this.direct.rows;
      runs.unshift(this.directFile as ArpaRowsFile);
    }
    let file: ArpaRowsFile;
    if (runs.length === 0) {
      const spool = await this.makeSpool(this.n, 'r0');
      await spool.close();
      file = { n: this.n, rows: 0, spool };
    } else if (runs.length === 1) {
      file = runs[0];
    } else {
      file = await this.merge(runs);
    }
    assert(file.rows === this.count, `order ${this.n}: the sorted file holds every row`);
    try {
      if (below !== null) await this.checkContexts(file, below);
    } catch (error) {
      await file.spool.remove();
      throw error;
    }
    return file;
  }

  /** Removes every file the order has made (after an error). */
  async remove(): Promise<void> {
    for (const run of this.runs) await run.spool.remove();
    await this.directFile?.spool.remove();
  }

  /** Sorts the buffered rows by their ids (LSD radix, 8-bit digits; stable, so equal rows keep
   *  the order they came in). */
  private sort(): void {
    const sorted = sortRowsByColumns(this.rows, this.spare, this.buffered, this.stride, this.idColumns, SORT_DIGIT_BITS);
    if (sorted !== this.rows) [this.rows, this.spare] = [this.spare, this.rows];
  }

  /** k-way merge of sorted runs into one file (a binary heap of cursors). */
  private async merge(runs: ArpaRowsFile[]): Promise<ArpaRowsFile> {
    const n = this.n;
    const spool = await this.makeSpool(n, 'sorted');
    const out: ArpaRowsFile = { n, rows: 0, spool };
    const writer = new BlockWriter(spool, n);
    const cursors = runs.map((run) => new RowCursor(run));
    try {
      const heap: RowCursor[] = [];
      for (const cursor of cursors) if (await cursor.next()) heap.push(cursor);
      const less = (a: RowCursor, b: RowCursor): boolean => {
        const blockA = a.block as Block;
        const blockB = b.block as Block;
        const d = compareRows(blockA.ids, a.row * n, blockB.ids, b.row * n, n);
        return d < 0 || (d === 0 && blockA.lines[a.row] < blockB.lines[b.row]);
      };
      const down = (from: number): void => {
        let i = from;
        for (;;) {
          const left = 2 * i + 1;
          if (left >= heap.length) return;
          const right = left + 1;
          const child = right < heap.length && less(heap[right], heap[left]) ? right : left;
          if (!less(heap[child], heap[i])) return;
          [heap[i], heap[child]] = [heap[child], heap[i]];
          i = child;
        }
      };
      for (let i = (heap.length >> 1) - 1; i >= 0; i--) down(i);
      const previous = new Uint32Array(n);
      let previousLine = 0;
      while (heap.length > 0) {
        const top = heap[0];
        const block = top.block as Block;
        const at = top.row * n;
        const line = block.lines[top.row];
        if (writer.rows > 0 && compareRows(previous, 0, block.ids, at, n) === 0) this.duplicate(block.ids, at, Math.max(line, previousLine));
        previous.set(block.ids.subarray(at, at + n));
        previousLine = line;
        if (writer.add(block.ids, at, line, block.prob[top.row], block.backOff[top.row])) await writer.flush();
        if (!top.step() && !(await top.next())) {
          const lastCursor = heap.pop() as RowCursor;
          if (heap.length === 0) break;
          heap[0] = lastCursor;
        }
        down(0);
      }
      await writer.end();
      out.rows = writer.rows;
    } catch (error) {
      await spool.remove();
      throw error;
    } finally {
      for (const cursor of cursors) await cursor.close();
    }
    for (const run of runs) await run.spool.remove();
    this.runs.length = 0;
    this.directFile = null;
    return out;
  }

  /** Walks `file` and `below` in step: every row's first n − 1 ids must be a row of `below`. */
  private async checkContexts(file: ArpaRowsFile, below: ArpaRowsFile): Promise<void> {
    const n = this.n;
    const rows = new RowCursor(file);
    const contexts = new RowCursor(below);
    try {
      let haveContext = await contexts.next();
      while (rows.step() || (await rows.next())) {
        const block = rows.block as Block;
        const at = rows.row * n;
        let d = -1;
        while (haveContext && (d = compareRows((contexts.block as Block).ids, contexts.row * (n - 1), block.ids, at, n - 1)) < 0) haveContext = contexts.step() || (await contexts.next());
        if (!haveContext || d !== 0) {
          throw this.context.error(`the n-gram "${this.context.ngramText(block.ids, at, n)}" has no (n−1)-gram "${this.context.ngramText(block.ids, at, n - 1)}" for its context`, block.lines[rows.row]);
        }
      }
    } finally {
      await rows.close();
      await contexts.close();
    }
  }

  private duplicate(ids: Uint32Array, at: number, line: number): never {
    throw this.context.error(`the n-gram "${this.context.ngramText(ids, at, this.n)}" appears twice`, line);
  }
}
