/**
 * Run files: one sorted spill of distinct n-grams of one order and one partition, with their counts.
 *
 * Byte-level spec: docs/run-file.md. In short, little-endian:
 *   header (64 bytes, crc32) · blocks of ≤ RUN_BLOCK_RECORDS_MAX records (each with its crc32, its
 *   first n-gram in full, then prefix/delta/varint-coded records) · trailer (32 bytes, crc32) that
 *   repeats the file length, so a truncated or extended file is caught when it is opened.
 *
 * The writer checks its input before writing a byte and writes through a StageFs (tmp file, fsync,
 * rename, directory sync). The reader streams block by block through a bounded buffer, verifies
 * every checksum before it decodes the bytes it covers, bounds every length field by the file size
 * and the limits, and reports any damage as a QuernError with code 'corrupt'.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { crc32 } from 'node:zlib';
import { assert, ioError, QuernError } from '../errors.ts';
import { writeFileThrough, type StageFs } from '../job/fsio.ts';
import { openForReading, readFullyAt } from '../job/file-read.ts';
import {
  BLOCK_HEADER_FIXED_BYTES, blockBytesMax, blockHeaderBytes, compareRows, DecodeFailure, decodeRecords,
  encodeBlock, RECORD_BYTES_MIN, recordBytesMax,
} from './block-codec.ts';

export { compareRows } from './block-codec.ts';
import { rowsNotIncreasing } from './codec-wasm.ts';
import {
  ORDER_MAX,
  PARTITIONS_MAX,
  RUN_BLOCK_RECORDS_MAX,
  RUN_COUNT_MAX,
  RUN_READ_BUFFER_BYTES,
  RUN_WRITE_BUFFER_BYTES,
} from '../limits.ts';

// ---- Format constants (docs/run-file.md) ----------------------------------------------------

/** Current format version; a reader accepts exactly this version (run files are job-internal). */
export const RUN_FORMAT_VERSION = 1;
/** Bytes of the file header. */
export const RUN_HEADER_BYTES = 64;
/** Bytes of the file trailer. */
export const RUN_TRAILER_BYTES = 32;
/** Fixed bytes of a block header (see block-codec.ts). */
export const RUN_BLOCK_HEADER_FIXED_BYTES = BLOCK_HEADER_FIXED_BYTES;

/** "QRNRUN": the first six bytes of every run file. */
const HEADER_MAGIC = Buffer.from('QRNRUN', 'latin1');
/** "QRNEND\0\0": the first eight bytes of the trailer. */
const TRAILER_MAGIC = Buffer.from('QRNEND\0\0', 'latin1');

const U32_MAX = 0xffff_ffff;
const TWO_POW_32 = 0x1_0000_0000;

// Header field offsets.
const H_VERSION = 6;
const H_ORDER = 8;
const H_PARTITION = 12;
const H_CHUNK = 16;
const H_SPILL = 20;
const H_RECORD_COUNT = 24;
const H_COUNT_SUM = 32;
const H_BLOCK_COUNT = 40;
const H_RECORDS_PER_BLOCK = 44;
const H_RESERVED = 48;
const H_CRC = 60;
// Trailer field offsets.
const T_FILE_BYTES = 8;
const T_BLOCK_COUNT = 16;
const T_HEADER_CRC = 20;
const T_RESERVED = 24;
const T_CRC = 28;

// ---- Domain types ---------------------------------------------------------------------------

/** Where a run comes from: which order and partition it holds, and which spill produced it. */
export interface RunMeta {
  /** N-gram order, 1..ORDER_MAX. */
  order: number;
  /** Partition index, 0..PARTITIONS_MAX−1. */
  partition: number;
  /** Index of the chunk whose counting produced the run (provenance; any uint32). */
  chunk: number;
  /** Sequence number of the spill within that chunk's counting (provenance; any uint32). */
  spill: number;
}

/** What a run file holds, as written (writeRunFile) or as read from its header (RunReader). */
export interface RunFileInfo extends RunMeta {
  filePath: string;
  formatVersion: number;
  /** Distinct n-grams in the file. */
  recordCount: number;
  /** Sum of their counts (≤ RUN_COUNT_MAX). */
  countSum: number;
  blockCount: number;
  /** Records in every block but the last (which holds 1..recordsPerBlock). */
  recordsPerBlock: number;
  /** Size of the whole file. */
  fileBytes: number;
}

/**
 * A batch of distinct n-grams in increasing lexicographic order of their id tuples:
 * row i is `keys[i*order .. (i+1)*order)` with count `counts[i]` (an integer ≥ 1).
 * `keys.length === recordCount * order` and `counts.length === recordCount`.
 */
export interface RunBatch {
  keys: Uint32Array;
  counts: Float64Array;
  recordCount: number;
}

// ---- Sizes ------------------------------------------------------------------------------------

// ---- Writer -----------------------------------------------------------------------------------

function checkMeta(meta: RunMeta): void {
  const { order, partition, chunk, spill } = meta;
  assert(Number.isInteger(order) && order >= 1 && order <= ORDER_MAX, `order ${order} must be an integer in 1..${ORDER_MAX}`);
  assert(
    Number.isInteger(partition) && partition >= 0 && partition < PARTITIONS_MAX,
    `partition ${partition} must be an integer in 0..${PARTITIONS_MAX - 1}`,
  );
  assert(Number.isInteger(chunk) && chunk >= 0 && chunk <= U32_MAX, `chunk ${chunk} must be an integer in 0..${U32_MAX}`);
  assert(Number.isInteger(spill) && spill >= 0 && spill <= U32_MAX, `spill ${spill} must be an integer in 0..${U32_MAX}`);
}

/**
 * Checks the counts before anything is written: integers in 1..RUN_COUNT_MAX, their sum ≤
 * RUN_COUNT_MAX; returns the sum. That the rows strictly increase is left to the block coders
 * (encodeBlock asserts it as it codes each block, before the file is renamed into place), and the
 * callers check where blocks meet: a comparison pass here was ~5 % of the count stage in a CPU
 * profile at order 5 (its early exit branches on the data).
 */
function checkCounts(counts: ArrayLike<number>, recordCount: number): number {
  let countSum = 0;
  for (let r = 0; r < recordCount; r++) {
    const count = counts[r];
    // Fast path: a uint32 count ≥ 1; otherwise an integer up to RUN_COUNT_MAX.
    if ((count >>> 0) !== count || count === 0) {
      if (!(count >= 1 && count <= RUN_COUNT_MAX && Math.floor(count) === count)) {
        assert(false, `count ${count} of record ${r} must be an integer in 1..${RUN_COUNT_MAX}`);
      }
    }
    countSum += count;
  }
  assert(countSum <= RUN_COUNT_MAX, `sum of counts ${countSum} exceeds ${RUN_COUNT_MAX}`);
  return countSum;
}

function writeU64(buf: Buffer, offset: number, value: number): void {
  buf.writeUInt32LE(value % TWO_POW_32, offset);
  buf.writeUInt32LE(Math.floor(value / TWO_POW_32), offset + 4);
}

function readU64(buf: Buffer, offset: number): number {
  const high = buf.readUInt32LE(offset + 4);
  if (high > 0x1f_ffff) return Number.POSITIVE_INFINITY; // above 2^53 − 1: caller rejects it
  return high * TWO_POW_32 + buf.readUInt32LE(offset);
}

function encodeHeader(buf: Buffer, meta: RunMeta, recordCount: number, countSum: number, blockCount: number): number {
  buf.fill(0, 0, RUN_HEADER_BYTES);
  HEADER_MAGIC.copy(buf, 0);
  buf.writeUInt16LE(RUN_FORMAT_VERSION, H_VERSION);
  buf.writeUInt32LE(meta.order, H_ORDER);
  buf.writeUInt32LE(meta.partition, H_PARTITION);
  buf.writeUInt32LE(meta.chunk, H_CHUNK);
  buf.writeUInt32LE(meta.spill, H_SPILL);
  writeU64(buf, H_RECORD_COUNT, recordCount);
  writeU64(buf, H_COUNT_SUM, countSum);
  buf.writeUInt32LE(blockCount, H_BLOCK_COUNT);
  buf.writeUInt32LE(RUN_BLOCK_RECORDS_MAX, H_RECORDS_PER_BLOCK);
  const headerCrc = crc32(buf.subarray(0, H_CRC));
  buf.writeUInt32LE(headerCrc, H_CRC);
  return headerCrc;
}

function encodeTrailer(buf: Buffer, p: number, fileBytes: number, blockCount: number, headerCrc: number): void {
  buf.fill(0, p, p + RUN_TRAILER_BYTES);
  TRAILER_MAGIC.copy(buf, p);
  writeU64(buf, p + T_FILE_BYTES, fileBytes);
  buf.writeUInt32LE(blockCount, p + T_BLOCK_COUNT);
  buf.writeUInt32LE(headerCrc, p + T_HEADER_CRC);
  buf.writeUInt32LE(crc32(buf.subarray(p, p + T_CRC)), p + T_CRC);
}

/**
 * Writes a run file: `recordCount` distinct n-grams of `meta.order` (row-major in `keys`, rows
 * strictly increasing in lexicographic order of their id tuples) and their counts (integers ≥ 1).
 * Input that breaks these rules is a programmer error (assertion), found before the file is
 * renamed into place (the rows' order as the blocks are coded). The file is written through `writeFileThrough` (a temporary file, synced, renamed to
 * `filePath`, the directory — which must exist — synced); on a failure (an 'io' QuernError from
 * `fs`) no temporary file is left behind, as far as `fs` still allows removing it, and a run that
 * is not recorded in job.json is never trusted (the stages remove unrecorded runs).
 */
export async function writeRunFile(
  fs: StageFs,
  filePath: string,
  meta: RunMeta,
  keys: Uint32Array,
  counts: ArrayLike<number>,
  recordCount: number,
): Promise<RunFileInfo> {
  checkMeta(meta);
  const order = meta.order;
  assert(
    Number.isInteger(recordCount) && recordCount >= 0 && recordCount <= RUN_COUNT_MAX,
    `recordCount ${recordCount} must be an integer in 0..${RUN_COUNT_MAX}`,
  );
  assert(keys.length >= recordCount * order, `keys holds ${keys.length} ids, fewer than recordCount × order = ${recordCount * order}`);
  assert(counts.length >= recordCount, `counts holds ${counts.length} counts, fewer than recordCount ${recordCount}`);
  const countSum = checkCounts(counts, recordCount);
  for (let first = RUN_BLOCK_RECORDS_MAX; first < recordCount; first += RUN_BLOCK_RECORDS_MAX) {
    if (compareRows(keys, (first - 1) * order, keys, first * order, order) >= 0) rowsNotIncreasing(first);
  }
  const blockCount = Math.ceil(recordCount / RUN_BLOCK_RECORDS_MAX);
  assert(blockCount <= U32_MAX, `recordCount ${recordCount} needs more than ${U32_MAX} blocks`);

  const fileBytesMax = RUN_HEADER_BYTES + RUN_TRAILER_BYTES + blockCount * blockHeaderBytes(order) + recordCount * recordBytesMax(order);
  const buf = Buffer.alloc(Math.min(RUN_WRITE_BUFFER_BYTES, fileBytesMax));
  let fileBytes = 0;
  await writeFileThrough(fs, filePath, async (file) => {
    const headerCrc = encodeHeader(buf, meta, recordCount, countSum, blockCount);
    let used = RUN_HEADER_BYTES;
    for (let first = 0; first < recordCount; first += RUN_BLOCK_RECORDS_MAX) {
      const records = Math.min(RUN_BLOCK_RECORDS_MAX, recordCount - first);
      if (buf.length - used < blockBytesMax(order, records)) {
        await file.write(buf.subarray(0, used));
        fileBytes += used;
        used = 0;
      }
      used = encodeBlock(buf, used, keys, counts, first, records, order);
    }
    if (buf.length - used < RUN_TRAILER_BYTES) {
      await file.write(buf.subarray(0, used));
      fileBytes += used;
      used = 0;
    }
    fileBytes += used + RUN_TRAILER_BYTES;
    encodeTrailer(buf, used, fileBytes, blockCount, headerCrc);
    await file.write(buf.subarray(0, used + RUN_TRAILER_BYTES));
  });
  return writtenInfo(filePath, meta, recordCount, countSum, blockCount, fileBytes);
}

/**
 * Writes a run file from sorted batches as they come — the merge of several runs, for a partition
 * with more runs than one merge opens at once (count/fan-in.ts) — holding one block, not
 * the records: the same bytes as `writeRunFile` of all the records at once. The header, whose
 * counts are known only at the end, is written last, over the placeholder at the start of the file.
 * Records must increase strictly across batches and have counts in 1..RUN_COUNT_MAX (assertions,
 * as in writeRunFile); atomic as writeRunFile. When iterating `batches` throws, so does this, and
 * no file is left.
 */
export async function writeRunFileFrom(fs: StageFs, filePath: string, meta: RunMeta, batches: AsyncIterable<RunBatch>): Promise<RunFileInfo> {
  checkMeta(meta);
  const order = meta.order;
  const blockKeys = new Uint32Array(RUN_BLOCK_RECORDS_MAX * order);
  const blockCounts = new Float64Array(RUN_BLOCK_RECORDS_MAX);
  const lastKey = new Uint32Array(order);
  const buf = Buffer.alloc(RUN_WRITE_BUFFER_BYTES);
  let inBlock = 0;
  let recordCount = 0;
  let countSum = 0;
  let blockCount = 0;
  let fileBytes = 0;
  await writeFileThrough(fs, filePath, async (file) => {
    await file.write(Buffer.alloc(RUN_HEADER_BYTES));
    fileBytes = RUN_HEADER_BYTES;
    let used = 0;
    const closeBlock = async (): Promise<void> => {
      if (recordCount > 0 && compareRows(lastKey, 0, blockKeys, 0, order) >= 0) {
        assert(false, `run keys must strictly increase: record ${recordCount} is not above record ${recordCount - 1}`);
      }
      countSum += checkCounts(blockCounts, inBlock);
      assert(countSum <= RUN_COUNT_MAX, `sum of counts ${countSum} exceeds ${RUN_COUNT_MAX}`);
      if (buf.length - used < blockBytesMax(order, inBlock)) {
        await file.write(buf.subarray(0, used));
        fileBytes += used;
        used = 0;
      }
      used = encodeBlock(buf, used, blockKeys, blockCounts, 0, inBlock, order);
      lastKey.set(blockKeys.subarray((inBlock - 1) * order, inBlock * order));
      recordCount += inBlock;
      blockCount++;
      inBlock = 0;
    };
    for await (const batch of batches) {
      for (let j = 0; j < batch.recordCount;) {
        const take = Math.min(RUN_BLOCK_RECORDS_MAX - inBlock, batch.recordCount - j);
        blockKeys.set(batch.keys.subarray(j * order, (j + take) * order), inBlock * order);
        blockCounts.set(batch.counts.subarray(j, j + take), inBlock);
        inBlock += take;
        j += take;
        if (inBlock === RUN_BLOCK_RECORDS_MAX) await closeBlock();
      }
    }
    if (inBlock > 0) await closeBlock();
    assert(blockCount <= U32_MAX, `${recordCount} records need more than ${U32_MAX} blocks`);
    if (buf.length - used < RUN_TRAILER_BYTES) {
      await file.write(buf.subarray(0, used));
      fileBytes += used;
      used = 0;
    }
    const header = Buffer.alloc(RUN_HEADER_BYTES);
    const headerCrc = encodeHeader(header, meta, recordCount, countSum, blockCount);
    fileBytes += used + RUN_TRAILER_BYTES;
    encodeTrailer(buf, used, fileBytes, blockCount, headerCrc);
    await file.write(buf.subarray(0, used + RUN_TRAILER_BYTES));
    await file.writeAt(header, 0);
  });
  return writtenInfo(filePath, meta, recordCount, countSum, blockCount, fileBytes);
}

/** What a writer returns about the run file it wrote. */
function writtenInfo(filePath: string, meta: RunMeta, recordCount: number, countSum: number, blockCount: number, fileBytes: number): RunFileInfo {
  return {
    filePath,
    formatVersion: RUN_FORMAT_VERSION,
    order: meta.order,
    partition: meta.partition,
    chunk: meta.chunk,
    spill: meta.spill,
    recordCount,
    countSum,
    blockCount,
    recordsPerBlock: RUN_BLOCK_RECORDS_MAX,
    fileBytes,
  };
}

// ---- Reader -----------------------------------------------------------------------------------

function corrupt(filePath: string, what: string): QuernError {
  return new QuernError('corrupt', `corrupt run file ${filePath}: ${what}`, { location: { file: filePath } });
}

/** The error of a run file that ends before the bytes its structure promises. */
function endsEarly(filePath: string): (endedAt: number, missing: number) => QuernError {
  return (endedAt, missing) => corrupt(filePath, `file ends at byte ${endedAt}, expected ${missing} more bytes (did it shrink?)`);
}

/** Parses and validates a header; returns the info without filePath-independent checks on size. */
function parseHeader(filePath: string, head: Buffer, fileBytes: number): RunFileInfo {
  if (!head.subarray(0, HEADER_MAGIC.length).equals(HEADER_MAGIC)) {
    throw corrupt(filePath, `bad magic ${head.subarray(0, HEADER_MAGIC.length).toString('hex')} at offset 0 (expected ${HEADER_MAGIC.toString('hex')}, "QRNRUN"): not a run file`);
  }
  const formatVersion = head.readUInt16LE(H_VERSION);
  if (formatVersion !== RUN_FORMAT_VERSION) {
    throw corrupt(filePath, `format version ${formatVersion} at offset ${H_VERSION} is not supported (this reader reads version ${RUN_FORMAT_VERSION}); recount to rewrite the runs`);
  }
  const headerCrc = crc32(head.subarray(0, H_CRC));
  if (headerCrc !== head.readUInt32LE(H_CRC)) {
    throw corrupt(filePath, `header checksum mismatch (stored ${head.readUInt32LE(H_CRC).toString(16)}, computed ${headerCrc.toString(16)})`);
  }
  for (let i = H_RESERVED; i < H_CRC; i++) {
    if (head[i] !== 0) throw corrupt(filePath, `reserved header byte at offset ${i} is ${head[i]}, must be 0`);
  }
  const order = head.readUInt32LE(H_ORDER);
  if (order < 1 || order > ORDER_MAX) throw corrupt(filePath, `order ${order} outside 1..${ORDER_MAX}`);
  const partition = head.readUInt32LE(H_PARTITION);
  if (partition >= PARTITIONS_MAX) throw corrupt(filePath, `partition ${partition} outside 0..${PARTITIONS_MAX - 1}`);
  const recordCount = readU64(head, H_RECORD_COUNT);
  const countSum = readU64(head, H_COUNT_SUM);
  const blockCount = head.readUInt32LE(H_BLOCK_COUNT);
  const recordsPerBlock = head.readUInt32LE(H_RECORDS_PER_BLOCK);
  if (!(countSum <= RUN_COUNT_MAX) || !(recordCount <= countSum)) {
    throw corrupt(filePath, `record count ${recordCount} and sum of counts ${countSum} are inconsistent`);
  }
  if (recordsPerBlock < 1 || recordsPerBlock > RUN_BLOCK_RECORDS_MAX) {
    throw corrupt(filePath, `records per block ${recordsPerBlock} outside 1..${RUN_BLOCK_RECORDS_MAX}`);
  }
  if (blockCount !== Math.ceil(recordCount / recordsPerBlock)) {
    // Every block but the last is full: the block count follows from the record count.
    throw corrupt(filePath, `block count ${blockCount} does not match ${recordCount} records of ${recordsPerBlock} per block`);
  }
  const payloadBytesMin = blockCount * (blockHeaderBytes(order) + 1) + Math.max(0, recordCount - blockCount) * RECORD_BYTES_MIN;
  if (RUN_HEADER_BYTES + payloadBytesMin + RUN_TRAILER_BYTES > fileBytes) {
    throw corrupt(filePath, `file of ${fileBytes} bytes is too short for ${recordCount} records in ${blockCount} blocks`);
  }
  return {
    filePath,
    formatVersion,
    order,
    partition,
    chunk: head.readUInt32LE(H_CHUNK),
    spill: head.readUInt32LE(H_SPILL),
    recordCount,
    countSum,
    blockCount,
    recordsPerBlock,
    fileBytes,
  };
}

function checkTrailer(filePath: string, tail: Buffer, info: RunFileInfo, headerCrc: number): void {
  const at = info.fileBytes - RUN_TRAILER_BYTES;
  if (!tail.subarray(0, TRAILER_MAGIC.length).equals(TRAILER_MAGIC)) {
    throw corrupt(filePath, `no trailer magic at offset ${at}: file truncated, extended or damaged`);
  }
  const trailerCrc = crc32(tail.subarray(0, T_CRC));
  if (trailerCrc !== tail.readUInt32LE(T_CRC)) throw corrupt(filePath, `trailer checksum mismatch at offset ${at + T_CRC}`);
  for (let i = T_RESERVED; i < T_CRC; i++) {
    if (tail[i] !== 0) throw corrupt(filePath, `reserved trailer byte at offset ${at + i} is ${tail[i]}, must be 0`);
  }
  const fileBytes = readU64(tail, T_FILE_BYTES);
  if (fileBytes !== info.fileBytes) throw corrupt(filePath, `trailer records ${fileBytes} file bytes, file has ${info.fileBytes}`);
  if (tail.readUInt32LE(T_HEADER_CRC) !== headerCrc) throw corrupt(filePath, 'trailer does not belong to this header (header checksum differs)');
  if (tail.readUInt32LE(T_BLOCK_COUNT) !== info.blockCount) {
    throw corrupt(filePath, `trailer block count ${tail.readUInt32LE(T_BLOCK_COUNT)} differs from header block count ${info.blockCount}`);
  }
}

/**
 * Streams a run file block by block. `open` validates the header and the trailer (magic, version,
 * checksums, sizes against the file size); `nextBatch` returns one decoded block at a time after
 * verifying its checksum, and at the end checks the totals against the header. Any damage raises
 * QuernError('corrupt') naming the file, the block and offset, and what failed; after an error
 * every further call raises it again. Memory: one buffer of ≤ RUN_READ_BUFFER_BYTES plus the batch.
 */
export class RunReader {
  /** What the header says; the totals are verified against the blocks by the time nextBatch returns null. */
  readonly info: RunFileInfo;
  private handle: fsp.FileHandle | undefined;
  private readonly buffer: Buffer;
  private bufferStart = 0;
  private bufferEnd = 0;
  /** File offset of the next byte to read into the buffer. */
  private fileOffset = RUN_HEADER_BYTES;
  private readonly payloadEnd: number;
  private blockIndex = 0;
  private recordsRead = 0;
  private countSumRead = 0;
  private readonly lastKey: Uint32Array;
  private failure: unknown = undefined;
  private finished = false;
  private busy = false;

  /** The arrays every batch is decoded into (`reuseBatches`), grown to the largest block. */
  private batchKeys: Uint32Array | undefined;
  private batchCounts: Float64Array | undefined;

  private constructor(handle: fsp.FileHandle, info: RunFileInfo, private readonly reuseBatches: boolean) {
    this.handle = handle;
    this.info = info;
    this.payloadEnd = info.fileBytes - RUN_TRAILER_BYTES;
    this.buffer = Buffer.allocUnsafe(Math.min(RUN_READ_BUFFER_BYTES, this.payloadEnd - RUN_HEADER_BYTES));
    this.lastKey = new Uint32Array(info.order);
  }

  get filePath(): string {
    return this.info.filePath;
  }

  /**
   * Opens `filePath` and validates its header and trailer. Errors: 'io' (cannot open or read),
   * 'corrupt'. With `reuseBatches`, every block is decoded into the same arrays (as long as the
   * largest block): a batch is then valid only until the next `nextBatch`, and its arrays may be
   * longer than its `recordCount` rows (for a reader that is done with a batch when it asks for the
   * next, as the k-way merge is: no garbage of a fresh pair of arrays per block).
   */
  static async open(filePath: string, options: { reuseBatches?: boolean } = {}): Promise<RunReader> {
    const { handle, bytes: fileBytes } = await openForReading(filePath);
    try {
      if (fileBytes < RUN_HEADER_BYTES + RUN_TRAILER_BYTES) {
        throw corrupt(filePath, `file is ${fileBytes} bytes, shorter than header and trailer (${RUN_HEADER_BYTES + RUN_TRAILER_BYTES} bytes)`);
      }
      const head = Buffer.alloc(RUN_HEADER_BYTES);
      await readFullyAt(handle, filePath, head, 0, endsEarly(filePath));
      const info = parseHeader(filePath, head, fileBytes);
      const tail = Buffer.alloc(RUN_TRAILER_BYTES);
      await readFullyAt(handle, filePath, tail, fileBytes - RUN_TRAILER_BYTES, endsEarly(filePath));
      checkTrailer(filePath, tail, info, head.readUInt32LE(H_CRC));
      return new RunReader(handle, info, options.reuseBatches === true);
    } catch (error) {
      await handle.close().catch(() => {});
      throw error;
    }
  }

  /** `open` of each of `filePaths` in turn; when one fails, those already open are closed and the
   *  error passed on (a merge's sources: fan-in.ts, listing.ts, merge-partition.ts). */
  static async openAll(filePaths: readonly string[], options: { reuseBatches?: boolean } = {}): Promise<RunReader[]> {
    const readers: RunReader[] = [];
    try {
      for (const filePath of filePaths) readers.push(await RunReader.open(filePath, options));
    } catch (error) {
      await Promise.all(readers.map((reader) => reader.close().catch(() => {})));
      throw error;
    }
    return readers;
  }

  /** The file path, as a BatchSource name. */
  get name(): string {
    return this.info.filePath;
  }

  get order(): number {
    return this.info.order;
  }

  /**
   * Returns the next block's records, or null after the last block once the totals have been
   * checked against the header (the file is then closed). Must not be called concurrently.
   */
  async nextBatch(): Promise<RunBatch | null> {
    if (this.failure !== undefined) throw this.failure;
    if (this.finished) return null;
    assert(!this.busy, 'RunReader.nextBatch called while a previous call is still running');
    this.busy = true;
    try {
      if (this.blockIndex === this.info.blockCount) {
        this.checkEnd();
        this.finished = true;
        await this.close();
        return null;
      }
      return await this.readBlock();
    } catch (error) {
      this.failure = error;
      await this.close().catch(() => {});
      throw error;
    } finally {
      this.busy = false;
    }
  }

  /** Closes the file; idempotent. A reader closed before its end returns no more batches. */
  async close(): Promise<void> {
    const handle = this.handle;
    if (handle === undefined) return;
    this.handle = undefined;
    if (!this.finished && this.failure === undefined) this.failure = new Error(`run reader of ${this.filePath} is closed`);
    try {
      await handle.close();
    } catch (cause) {
      throw ioError('close', this.filePath, cause);
    }
  }

  /** Makes at least `needed` bytes available at bufferStart, reading from the file as needed. */
  private async fill(needed: number, blockOffset: number): Promise<void> {
    if (this.bufferEnd - this.bufferStart >= needed) return;
    const buffer = this.buffer;
    if (this.bufferStart > 0) {
      buffer.copyWithin(0, this.bufferStart, this.bufferEnd);
      this.bufferEnd -= this.bufferStart;
      this.bufferStart = 0;
    }
    const handle = this.handle;
    assert(handle !== undefined, 'run reader reads after close');
    while (this.bufferEnd < needed) {
      const length = Math.min(buffer.length - this.bufferEnd, this.payloadEnd - this.fileOffset);
      if (length === 0) {
        throw corrupt(this.filePath, `block ${this.blockIndex} at offset ${blockOffset}: needs ${needed} bytes, only ${this.bufferEnd} remain before the trailer`);
      }
      let bytesRead: number;
      try {
        ({ bytesRead } = await handle.read(buffer, this.bufferEnd, length, this.fileOffset));
      } catch (cause) {
        throw ioError('read', this.filePath, cause);
      }
      if (bytesRead === 0) throw corrupt(this.filePath, `file ends at byte ${this.fileOffset}, before its trailer (did it shrink?)`);
      this.bufferEnd += bytesRead;
      this.fileOffset += bytesRead;
    }
  }

  private async readBlock(): Promise<RunBatch> {
    const order = this.info.order;
    const blockOffset = this.fileOffset - (this.bufferEnd - this.bufferStart);
    const where = `block ${this.blockIndex} at offset ${blockOffset}`;
    const headerBytes = blockHeaderBytes(order);
    await this.fill(headerBytes, blockOffset);
    const buffer = this.buffer;
    let at = this.bufferStart;
    const storedCrc = buffer.readUInt32LE(at);
    const recordCount = buffer.readUInt32LE(at + 4);
    const recordBytes = buffer.readUInt32LE(at + 8);
    const isLast = this.blockIndex + 1 === this.info.blockCount;
    const recordCountExpected = isLast ? this.info.recordCount - this.recordsRead : this.info.recordsPerBlock;
    if (recordCount !== recordCountExpected) {
      throw corrupt(this.filePath, `${where}: record count ${recordCount}, expected ${recordCountExpected}`);
    }
    if (recordBytes < 1 + (recordCount - 1) * RECORD_BYTES_MIN || recordBytes > recordCount * recordBytesMax(order)) {
      throw corrupt(this.filePath, `${where}: ${recordBytes} record bytes impossible for ${recordCount} records of order ${order}`);
    }
    const blockBytes = headerBytes + recordBytes;
    if (blockOffset + blockBytes > this.payloadEnd) {
      throw corrupt(this.filePath, `${where}: ${blockBytes} bytes run past the trailer at offset ${this.payloadEnd}`);
    }
    await this.fill(blockBytes, blockOffset);
    at = this.bufferStart;
    const computedCrc = crc32(buffer.subarray(at + 4, at + blockBytes));
    if (computedCrc !== storedCrc) {
      throw corrupt(this.filePath, `${where}: checksum mismatch (stored ${storedCrc.toString(16)}, computed ${computedCrc.toString(16)})`);
    }

    let keys: Uint32Array;
    let counts: Float64Array;
    if (this.reuseBatches) {
      if (this.batchKeys === undefined || this.batchCounts!.length < recordCount) {
        this.batchKeys = new Uint32Array(recordCount * order);
        this.batchCounts = new Float64Array(recordCount);
      }
      keys = this.batchKeys;
      counts = this.batchCounts!;
    } else {
      keys = new Uint32Array(recordCount * order);
      counts = new Float64Array(recordCount);
    }
    for (let j = 0; j < order; j++) keys[j] = buffer.readUInt32LE(at + RUN_BLOCK_HEADER_FIXED_BYTES + 4 * j);
    if (this.blockIndex > 0 && compareRows(keys, 0, this.lastKey, 0, order) <= 0) {
      throw corrupt(this.filePath, `${where}: first n-gram is not above the last n-gram of block ${this.blockIndex - 1}`);
    }
    let countSum: number;
    try {
      countSum = decodeRecords(buffer, at + headerBytes, at + blockBytes, order, recordCount, keys, counts);
    } catch (failure) {
      if (!(failure instanceof DecodeFailure)) throw failure;
      throw corrupt(this.filePath, `${where}, record ${failure.recordIndex}: ${failure.reason}`);
    }
    this.recordsRead += recordCount;
    this.countSumRead += countSum;
    if (this.countSumRead > this.info.countSum) {
      throw corrupt(this.filePath, `${where}: blocks sum to more counts than the header states (${this.info.countSum})`);
    }
    this.lastKey.set(keys.subarray((recordCount - 1) * order, recordCount * order));
    this.bufferStart += blockBytes;
    this.blockIndex += 1;
    return { keys, counts, recordCount };
  }

  private checkEnd(): void {
    const offset = this.fileOffset - (this.bufferEnd - this.bufferStart);
    if (offset !== this.payloadEnd) {
      throw corrupt(this.filePath, `${this.payloadEnd - offset} unexpected bytes at offset ${offset} after the last block`);
    }
    if (this.recordsRead !== this.info.recordCount) {
      throw corrupt(this.filePath, `blocks hold ${this.recordsRead} records, header states ${this.info.recordCount}`);
    }
    if (this.countSumRead !== this.info.countSum) {
      throw corrupt(this.filePath, `blocks sum to ${this.countSumRead} counts, header states ${this.info.countSum}`);
    }
  }
}

