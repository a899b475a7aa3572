/**
 * Estimate result files: what the streaming estimator writes per partition and order — the rows of
 * the model with one float64 value each (log10 probabilities, or log10 back-off weights of
 * contexts), sorted ascending by their ids. Spec: docs/estimate-files.md.
 *
 * Layout (little-endian): header (64 bytes, crc32) · blocks of ≤ RESULT_BLOCK_ROWS rows (each with
 * its crc32, its first row in full, the later rows prefix/delta/varint-coded as in run files, then
 * the values as float64) · trailer (32 bytes, crc32) with the file size and the row count, so a
 * truncated or extended file is caught when it is opened.
 *
 * The writer appends block by block to a WritableFile that the caller opened through
 * writeFileThrough (temporary name, fsync, rename), keeping up to RESULT_WRITE_AHEAD_BYTES of writes
 * under way while its caller computes the next rows; the reader streams block by block, verifies
 * every checksum before it decodes what it covers and reports damage as QuernError 'corrupt'
 * naming the file.
 */
import { promises as fsp } from 'node:fs';
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import type { WritableFile } from '../job/fsio.ts';
import { openForReading, readFullyAt } from '../job/file-read.ts';
import { ORDER_MAX, RESULT_ARENA_BYTES, RESULT_BLOCK_ROWS, RESULT_SPARE_ARENAS } from '../limits.ts';
import { compareRows, readVarU32, DecodeFailure } from '../count/block-codec.ts';

export const RESULT_FORMAT_VERSION = 1;
export const RESULT_HEADER_BYTES = 64;
export const RESULT_TRAILER_BYTES = 32;
const HEADER_MAGIC = Buffer.from('QRNEST', 'latin1');
const TRAILER_MAGIC = Buffer.from('QRNESTZ\0', 'latin1');
/** Partition number of a file that belongs to the whole job (the unigrams). */
export const RESULT_WHOLE_JOB = 0xffff_ffff;
const BLOCK_FIXED_BYTES = 12;
const TWO_POW_32 = 0x1_0000_0000;

/** What a file's values are. */
export type ResultKind = 'probabilities' | 'back-off';
const KIND_CODE: Record<ResultKind, number> = { probabilities: 1, 'back-off': 2 };

export interface ResultMeta {
  kind: ResultKind;
  /** Order of the rows, 1..ORDER_MAX. */
  order: number;
  /** Partition, or RESULT_WHOLE_JOB. */
  partition: number;
}

/** Rows of one block: `rows` rows of `order` ids and one value each. */
export interface ResultBatch {
  rows: number;
  ids: Uint32Array;
  values: Float64Array;
}

function blockBytesMax(order: number, rows: number): number {
  return BLOCK_FIXED_BYTES + 4 * order + rows * (1 + 5 * order) + 8 * rows;
}
assert(blockBytesMax(ORDER_MAX, RESULT_BLOCK_ROWS) <= RESULT_ARENA_BYTES, 'a result buffer holds the largest block');

/** Bytes to write, in order; `arena` is the buffer they lie in when it may be reused once written. */
interface PendingWrite {
  data: Buffer;
  arena: Buffer | null;
}

function encodeHeader(meta: ResultMeta): Buffer {
  const head = Buffer.alloc(RESULT_HEADER_BYTES);
  HEADER_MAGIC.copy(head, 0);
  head.writeUInt16LE(RESULT_FORMAT_VERSION, 6);
  head[8] = KIND_CODE[meta.kind];
  head.writeUInt32LE(meta.order, 12);
  head.writeUInt32LE(meta.partition, 16);
  head.writeUInt32LE(crc32(head.subarray(0, 60)), 60);
  return head;
}

/** Bytes a ResultWriter may have handed to the file system and not yet seen written. */
export const RESULT_WRITE_AHEAD_BYTES = 8 << 20;

/**
 * Writes a result file's contents to `file`, a block at a time: `add` rows in strictly increasing
 * order (asserted), `drain` now and then to start writing what is encoded, `finish` once at the end.
 * Writes go one after another in the order they were started; `drain` waits for them only when more
 * than RESULT_WRITE_AHEAD_BYTES are under way, `finish` for all. A failed write fails the next
 * `drain` or `finish`.
 */
export class ResultWriter {
  private readonly ids: Uint32Array;
  private readonly values: Float64Array;
  private staged = 0;
  private pending: PendingWrite[] = [];
  private pendingBytes = 0;
  /** The buffer blocks are encoded into (bytes [0, arenaUsed) of it not yet pending), and buffers
   *  written already, for reuse. */
  private arena: Buffer | null = null;
  private arenaUsed = 0;
  private readonly spareArenas: Buffer[] = [];
  private readonly headerCrc: number;
  private bytes = 0;
  /** The writes started, chained; and the bytes they hold that are not yet written. */
  private writing: Promise<void> = Promise.resolve();
  private writingBytes = 0;
  rows = 0;
  private readonly last: Uint32Array;
  private finished = false;

  constructor(private readonly file: WritableFile, readonly meta: ResultMeta) {
    assert(Number.isInteger(meta.order) && meta.order >= 1 && meta.order <= ORDER_MAX, `result order ${meta.order} in 1..${ORDER_MAX}`);
    this.ids = new Uint32Array(RESULT_BLOCK_ROWS * meta.order);
    this.values = new Float64Array(RESULT_BLOCK_ROWS);
    this.last = new Uint32Array(meta.order);
    const head = encodeHeader(meta);
    this.headerCrc = head.readUInt32LE(60);
    this.push(head);
  }

  private push(bytes: Buffer): void {
    this.sealArena();
    this.pending.push({ data: bytes, arena: null });
    this.pendingBytes += bytes.length;
  }

  /** Bytes of the arena for a block of up to `bytesMax` bytes (a fresh or spare arena when full). */
  private arenaFor(bytesMax: number): Buffer {
    if (this.arena !== null && this.arenaUsed + bytesMax > this.arena.length) this.sealArena();
    if (this.arena === null) {
      this.arena = this.spareArenas.pop() ?? Buffer.allocUnsafeSlow(RESULT_ARENA_BYTES);
      this.arenaUsed = 0;
    }
    return this.arena.subarray(this.arenaUsed, this.arenaUsed + bytesMax);
  }

  /** Queues the encoded part of the arena for writing; the next block takes another arena. */
  private sealArena(): void {
    if (this.arena === null) return;
    if (this.arenaUsed > 0) this.pending.push({ data: this.arena.subarray(0, this.arenaUsed), arena: this.arena });
    else this.spareArenas.push(this.arena);
    this.arena = null;
    this.arenaUsed = 0;
  }

  /** Bytes encoded but not yet written. */
  get pendingByteCount(): number {
    return this.pendingBytes;
  }

  /**
   * Adds the row ids[offset .. offset+order) with `value`. That rows strictly increase is asserted
   * when their block is encoded (the delta coding compares each row with the one before anyway).
   */
  add(ids: Uint32Array, offset: number, value: number): void {
    const order = this.meta.order;
    const base = this.staged * order;
    for (let j = 0; j < order; j++) this.ids[base + j] = ids[offset + j];
    this.values[this.staged++] = value;
    this.rows++;
    if (this.staged === RESULT_BLOCK_ROWS) this.encodeStaged();
  }

  private encodeStaged(): void {
    const rows = this.staged;
    if (rows === 0) return;
    const order = this.meta.order;
    const ids = this.ids;
    const last = this.last;
    // The block's first row against the previous block's last.
    if (this.rows > rows && compareRows(ids, 0, last, 0, order) <= 0) assert(false, `result rows of order ${order} strictly increase`);
    const buf = this.arenaFor(blockBytesMax(order, rows));
    buf.writeUInt32LE(rows, 4);
    for (let j = 0; j < order; j++) buf.writeUInt32LE(ids[j], BLOCK_FIXED_BYTES + 4 * j);
    const idStart = BLOCK_FIXED_BYTES + 4 * order;
    let p = idStart;
    for (let r = 1; r < rows; r++) {
      const base = r * order;
      const prev = base - order;
      let shared = 0;
      while (shared < order && ids[base + shared] === ids[prev + shared]) shared++;
      if (shared === order || ids[base + shared] < ids[prev + shared]) assert(false, `result rows of order ${order} strictly increase`);
      buf[p++] = shared;
      // LEB128 varints (putVarU32's bytes) written inline: with a vocabulary of more than 128
      // words most ids, and many deltas, take two or three bytes, and a call per varint cost more
      // than the writing.
      let delta = ids[base + shared] - ids[prev + shared];
      while (delta >= 0x80) {
        buf[p++] = delta | 0x80;
        delta >>>= 7;
      }
      buf[p++] = delta;
      for (let j = shared + 1; j < order; j++) {
        let id = ids[base + j];
        while (id >= 0x80) {
          buf[p++] = id | 0x80;
          id >>>= 7;
        }
        buf[p++] = id;
      }
    }
    buf.writeUInt32LE(p - idStart, 8);
    const valueBytes = new Uint8Array(this.values.buffer, 0, rows * 8);
    buf.set(valueBytes, p);
    p += rows * 8;
    buf.writeUInt32LE(crc32(buf.subarray(4, p)), 0);
    this.arenaUsed += p;
    this.pendingBytes += p;
    for (let j = 0; j < order; j++) last[j] = ids[(rows - 1) * order + j];
    this.staged = 0;
  }

  /** Starts writing the encoded blocks; waits while more than RESULT_WRITE_AHEAD_BYTES are under way. */
  async drain(): Promise<void> {
    this.sealArena();
    for (const { data, arena } of this.pending) {
      this.writing = this.writing.then(async () => {
        await this.file.write(data);
        this.writingBytes -= data.length;
        if (arena !== null && this.spareArenas.length < RESULT_SPARE_ARENAS) this.spareArenas.push(arena);
      });
      this.writing.catch(() => undefined); // awaited (and so reported) by the next drain or finish
    }
    this.pending = [];
    this.bytes += this.pendingBytes;
    this.writingBytes += this.pendingBytes;
    this.pendingBytes = 0;
    if (this.writingBytes > RESULT_WRITE_AHEAD_BYTES) await this.writing;
  }

  /** Encodes the last block and the trailer and writes everything; returns rows and file bytes. */
  async finish(): Promise<{ rows: number; bytes: number }> {
    assert(!this.finished, 'a result writer finishes once');
    this.finished = true;
    this.encodeStaged();
    const trailer = Buffer.alloc(RESULT_TRAILER_BYTES);
    const bytes = this.bytes + this.pendingBytes + RESULT_TRAILER_BYTES;
    TRAILER_MAGIC.copy(trailer, 0);
    trailer.writeUInt32LE(bytes % TWO_POW_32, 8);
    trailer.writeUInt32LE(Math.floor(bytes / TWO_POW_32), 12);
    trailer.writeUInt32LE(this.rows % TWO_POW_32, 16);
    trailer.writeUInt32LE(Math.floor(this.rows / TWO_POW_32), 20);
    trailer.writeUInt32LE(this.headerCrc, 24);
    trailer.writeUInt32LE(crc32(trailer.subarray(0, 28)), 28);
    this.push(trailer);
    await this.drain();
    await this.writing;
    assert(this.bytes === bytes, 'result file bytes add up');
    return { rows: this.rows, bytes };
  }
}

function corrupt(filePath: string, what: string): QuernError {
  return new QuernError('corrupt', `damaged estimate result ${filePath}: ${what}; re-run quern estimate with --restart to estimate again`, { location: { file: filePath } });
}

/**
 * Streams a result file block by block after checking its header and trailer against `meta` (and
 * the row count and size recorded in job.json, when given).
 */
export class ResultReader {
  private offset = RESULT_HEADER_BYTES;
  private rowsRead = 0;
  /** The error a damaged block raised: the file is closed and every later nextBatch throws it. */
  private failure: unknown = undefined;
  private readonly last: Uint32Array;

  private constructor(private handle: fsp.FileHandle | undefined, readonly filePath: string, readonly meta: ResultMeta, readonly rows: number, private readonly payloadEnd: number) {
    this.last = new Uint32Array(meta.order);
  }

  static async open(filePath: string, meta: ResultMeta, expected?: { rows: number; bytes: number }): Promise<ResultReader> {
    const { handle, bytes: size } = await openForReading(filePath);
    try {
      if (size < RESULT_HEADER_BYTES + RESULT_TRAILER_BYTES) throw corrupt(filePath, `${size} bytes is shorter than header and trailer`);
      const head = Buffer.alloc(RESULT_HEADER_BYTES);
      const tail = Buffer.alloc(RESULT_TRAILER_BYTES);
      await readFullyAt(handle, filePath, head, 0, endsEarly(filePath));
      await readFullyAt(handle, filePath, tail, size - RESULT_TRAILER_BYTES, endsEarly(filePath));
      if (!head.subarray(0, 6).equals(HEADER_MAGIC)) throw corrupt(filePath, 'bad magic: not an estimate result file');
      if (head.readUInt16LE(6) !== RESULT_FORMAT_VERSION) throw corrupt(filePath, `format version ${head.readUInt16LE(6)} is not ${RESULT_FORMAT_VERSION}`);
      if (crc32(head.subarray(0, 60)) !== head.readUInt32LE(60)) throw corrupt(filePath, 'header checksum mismatch');
      if (head.subarray(9, 12).some((b) => b !== 0) || head.subarray(20, 60).some((b) => b !== 0)) throw corrupt(filePath, 'reserved header bytes are not zero');
      const found = { kind: head[8], order: head.readUInt32LE(12), partition: head.readUInt32LE(16) };
      if (found.kind !== KIND_CODE[meta.kind] || found.order !== meta.order || found.partition !== meta.partition) {
        throw corrupt(filePath, `holds kind ${found.kind}, order ${found.order}, partition ${found.partition}; expected ${meta.kind} of order ${meta.order}, partition ${meta.partition}`);
      }
      if (!tail.subarray(0, 8).equals(TRAILER_MAGIC) || crc32(tail.subarray(0, 28)) !== tail.readUInt32LE(28)) {
        throw corrupt(filePath, 'no valid trailer: the file was truncated, extended or damaged');
      }
      const bytes = tail.readUInt32LE(8) + tail.readUInt32LE(12) * TWO_POW_32;
      const rows = tail.readUInt32LE(16) + tail.readUInt32LE(20) * TWO_POW_32;
      if (bytes !== size) throw corrupt(filePath, `trailer records ${bytes} bytes, the file has ${size}`);
      if (tail.readUInt32LE(24) !== head.readUInt32LE(60)) throw corrupt(filePath, 'trailer does not belong to this header');
      if (expected !== undefined && (expected.rows !== rows || expected.bytes !== bytes)) {
        throw corrupt(filePath, `holds ${rows} rows in ${bytes} bytes, job.json records ${expected.rows} rows in ${expected.bytes} bytes`);
      }
      return new ResultReader(handle, filePath, meta, rows, size - RESULT_TRAILER_BYTES);
    } catch (error) {
      await handle.close().catch(() => undefined);
      throw error;
    }
  }

  /** The next block, or null at the end (the file is then closed, after the totals are checked).
   *  A damaged block closes the file too, and every later call throws the same error. */
  async nextBatch(): Promise<ResultBatch | null> {
    if (this.failure !== undefined) throw this.failure;
    try {
      return await this.readBatch();
    } catch (error) {
      this.failure = error;
      await this.close().catch(() => undefined);
      throw error;
    }
  }

  private async readBatch(): Promise<ResultBatch | null> {
    const handle = this.handle;
    if (handle === undefined) return null;
    const order = this.meta.order;
    if (this.offset === this.payloadEnd) {
      if (this.rowsRead !== this.rows) throw corrupt(this.filePath, `blocks hold ${this.rowsRead} rows, the trailer ${this.rows}`);
      await this.close();
      return null;
    }
    const where = `block at offset ${this.offset}`;
    const fixed = BLOCK_FIXED_BYTES + 4 * order;
    if (this.offset + fixed > this.payloadEnd) throw corrupt(this.filePath, `${where} runs into the trailer`);
    const head = Buffer.alloc(fixed);
    await readFullyAt(handle, this.filePath, head, this.offset, endsEarly(this.filePath));
    const rows = head.readUInt32LE(4);
    const idBytes = head.readUInt32LE(8);
    if (rows < 1 || rows > RESULT_BLOCK_ROWS || idBytes > (rows - 1) * (1 + 5 * order)) throw corrupt(this.filePath, `${where}: impossible sizes (${rows} rows, ${idBytes} id bytes)`);
    const blockBytes = fixed + idBytes + 8 * rows;
    if (this.offset + blockBytes > this.payloadEnd) throw corrupt(this.filePath, `${where}: ${blockBytes} bytes run into the trailer`);
    const block = Buffer.alloc(blockBytes);
    head.copy(block, 0);
    await readFullyAt(handle, this.filePath, block.subarray(fixed), this.offset + fixed, endsEarly(this.filePath));
    if (crc32(block.subarray(4)) !== block.readUInt32LE(0)) throw corrupt(this.filePath, `${where}: checksum mismatch`);
    const ids = new Uint32Array(rows * order);
    for (let j = 0; j < order; j++) ids[j] = block.readUInt32LE(BLOCK_FIXED_BYTES + 4 * j);
    const cursor = { p: fixed };
    const idEnd = fixed + idBytes;
    try {
      for (let r = 1; r < rows; r++) {
        const base = r * order;
        const prev = base - order;
        const shared = block[cursor.p++];
        if (shared >= order) throw new DecodeFailure(r, `shared prefix ${shared} not below the order`);
        for (let j = 0; j < shared; j++) ids[base + j] = ids[prev + j];
        const delta = readVarU32(block, cursor, r);
        if (!(delta >= 1)) throw new DecodeFailure(r, 'rows do not increase');
        ids[base + shared] = ids[prev + shared] + delta;
        for (let j = shared + 1; j < order; j++) ids[base + j] = readVarU32(block, cursor, r);
        if (cursor.p > idEnd) throw new DecodeFailure(r, 'row runs past the id area');
      }
    } catch (failure) {
      if (!(failure instanceof DecodeFailure)) throw failure;
      throw corrupt(this.filePath, `${where}, row ${failure.recordIndex}: ${failure.reason}`);
    }
    if (cursor.p !== idEnd) throw corrupt(this.filePath, `${where}: id area ends at ${cursor.p - fixed} of ${idBytes} bytes`);
    if (this.rowsRead > 0) {
      let j = 0;
      while (j < order && ids[j] === this.last[j]) j++;
      if (j === order || ids[j] < this.last[j]) throw corrupt(this.filePath, `${where}: first row not above the previous block's last`);
    }
    this.last.set(ids.subarray((rows - 1) * order));
    const values = new Float64Array(rows);
    new Uint8Array(values.buffer).set(block.subarray(idEnd, idEnd + 8 * rows));
    this.offset += blockBytes;
    this.rowsRead += rows;
    if (this.rowsRead > this.rows) throw corrupt(this.filePath, `blocks hold more rows than the trailer's ${this.rows}`);
    return { rows, ids, values };
  }

  async close(): Promise<void> {
    const handle = this.handle;
    this.handle = undefined;
    await handle?.close();
  }
}

/** The error of a result file that ends before the data its header describes. */
function endsEarly(filePath: string): (endedAt: number) => QuernError {
  return (endedAt) => corrupt(filePath, `ends at byte ${endedAt}, before the data its header describes`);
}
