/**
 * The block coding shared by run files and the count store: a block of n-grams in increasing
 * order, with its crc32, record count, record bytes and first n-gram in full, then each later
 * record as (shared prefix length, delta of the first differing id, remaining ids, count) in
 * LEB128 varints. Spec: docs/run-file.md ("Block").
 */
import { crc32 } from 'node:zlib';
import { RUN_COUNT_MAX } from '../limits.ts';
import { encodeRecordsWasm, rowsNotIncreasing } from './codec-wasm.ts';

/** Fixed bytes of a block header before its first n-gram: crc32, record count, record bytes. */
export const BLOCK_HEADER_FIXED_BYTES = 12;

const U32_MAX = 0xffff_ffff;
/** Fewest bytes a record after the first can take: shared byte, delta, count. */
export const RECORD_BYTES_MIN = 3;

/** Bytes of one coded record of `order` at most (see RUN_RECORD_BYTES_MAX in limits.ts). */
export function recordBytesMax(order: number): number {
  return 1 + 5 * order + 8;
}

/** Bytes of a block header of `order`: fixed fields plus the first n-gram. */
export function blockHeaderBytes(order: number): number {
  return BLOCK_HEADER_FIXED_BYTES + 4 * order;
}

/** Bytes of a block of `records` records of `order` at most. */
export function blockBytesMax(order: number, records: number): number {
  return blockHeaderBytes(order) + records * recordBytesMax(order);
}

/** Writes `value` (≤ 2^32−1) as an LEB128 varint at `p`; returns the offset after it. */
export function putVarU32(buf: Uint8Array, p: number, value: number): number {
  if (value < 0x80) {
    buf[p] = value;
    return p + 1;
  }
  if (value < 0x4000) {
    buf[p] = value | 0x80;
    buf[p + 1] = value >>> 7;
    return p + 2;
  }
  if (value < 0x20_0000) {
    // Three bytes: most ids of a vocabulary of thousands of words.
    buf[p] = value | 0x80;
    buf[p + 1] = (value >>> 7) | 0x80;
    buf[p + 2] = value >>> 14;
    return p + 3;
  }
  let v = value;
  while (v > 0x7f) {
    buf[p++] = (v & 0x7f) | 0x80;
    v >>>= 7;
  }
  buf[p++] = v;
  return p;
}

/** Writes a count (≤ 2^53−1) as an LEB128 varint at `p`; returns the offset after it. */
export function putVarCount(buf: Uint8Array, p: number, value: number): number {
  if (value <= U32_MAX) return putVarU32(buf, p, value);
  let v = value;
  while (v > 0x7f) {
    buf[p++] = (v % 128) | 0x80;
    v = Math.floor(v / 128);
  }
  buf[p++] = v;
  return p;
}

/** Encodes one block of records [first, first+recordCount) at `p0`; returns the offset after it.
 *  Rows that do not strictly increase within the block are an assertion (naming the record's index
 *  in `keys`), checked by the coders as they code. */
export function encodeBlock(
  buf: Buffer,
  p0: number,
  keys: Uint32Array,
  counts: ArrayLike<number>,
  first: number,
  recordCount: number,
  order: number,
): number {
  buf.writeUInt32LE(recordCount, p0 + 4);
  for (let j = 0; j < order; j++) buf.writeUInt32LE(keys[first * order + j], p0 + BLOCK_HEADER_FIXED_BYTES + 4 * j);
  const recordsStart = p0 + blockHeaderBytes(order);
  let p = encodeRecordsWasm(buf, recordsStart, keys, counts, first, recordCount, order);
  if (p < 0) p = encodeRecordsJs(buf, recordsStart, keys, counts, first, recordCount, order);
  buf.writeUInt32LE(p - recordsStart, p0 + 8);
  buf.writeUInt32LE(crc32(buf.subarray(p0 + 4, p)), p0);
  return p;
}

/** encodeBlock's records (from the first record's count on) at `start`, in JavaScript; returns the
 *  offset after them. */
function encodeRecordsJs(buf: Buffer, start: number, keys: Uint32Array, counts: ArrayLike<number>, first: number, recordCount: number, order: number): number {
  let p = putVarCount(buf, start, counts[first]);
  const end = first + recordCount;
  for (let r = first + 1; r < end; r++) {
    const base = r * order;
    const prev = base - order;
    let shared = 0;
    while (shared < order - 1 && keys[base + shared] === keys[prev + shared]) shared++;
    const id = keys[base + shared];
    const before = keys[prev + shared];
    if (id <= before) rowsNotIncreasing(r);
    buf[p++] = shared;
    p = putVarU32(buf, p, id - before);
    for (let j = shared + 1; j < order; j++) p = putVarU32(buf, p, keys[base + j]);
    p = putVarCount(buf, p, counts[r]);
  }
  return p;
}

/** A reason a block's records failed to decode, with the record index (internal). */
export class DecodeFailure {
  constructor(readonly recordIndex: number, readonly reason: string) {}
}

/** Reading position within a block's records; a tiny object so varint reads can advance it. */
interface Cursor {
  p: number;
}

/**
 * Reads an LEB128 varint of at most 5 bytes and ≤ 2^32−1. A read past the record area is caught
 * by the caller's position check after the record; past the end of `src` a byte reads as
 * undefined, which ends the varint (and may give NaN, which the callers' checks reject).
 */
export function readVarU32(src: Uint8Array, cursor: Cursor, recordIndex: number): number {
  let p = cursor.p;
  let b = src[p++];
  let v = b & 0x7f;
  if (b >= 0x80) {
    b = src[p++];
    v |= (b & 0x7f) << 7;
    if (b >= 0x80) {
      b = src[p++];
      v |= (b & 0x7f) << 14;
      if (b >= 0x80) {
        b = src[p++];
        v |= (b & 0x7f) << 21;
        if (b >= 0x80) {
          b = src[p++];
          if (b > 0x0f) throw new DecodeFailure(recordIndex, 'word id varint exceeds 32 bits');
          v += b * 0x1000_0000;
        }
      }
    }
  }
  cursor.p = p;
  return v;
}

/** Reads a count varint of at most 8 bytes; checks 1 ≤ count ≤ RUN_COUNT_MAX. */
export function readVarCount(src: Uint8Array, cursor: Cursor, recordIndex: number): number {
  let p = cursor.p;
  let b = src[p++];
  let v = b & 0x7f;
  if (b >= 0x80) {
    let scale = 0x80;
    for (let k = 1; ; k++) {
      if (k === 8) throw new DecodeFailure(recordIndex, 'count varint longer than 8 bytes');
      b = src[p++];
      v += (b & 0x7f) * scale;
      if (!(b >= 0x80)) break;
      scale *= 0x80;
    }
  }
  if (!(v >= 1 && v <= RUN_COUNT_MAX)) throw new DecodeFailure(recordIndex, `count ${v} outside 1..${RUN_COUNT_MAX}`);
  cursor.p = p;
  return v;
}

/**
 * Decodes the records of one block whose bytes are src[start, end) into `keys`/`counts`
 * (keys[0..order) already hold the first n-gram from the block header). Returns the sum of counts.
 * Rows come out strictly increasing by construction (delta ≥ 1 at the first differing position).
 */
export function decodeRecords(
  src: Uint8Array,
  start: number,
  end: number,
  order: number,
  recordCount: number,
  keys: Uint32Array,
  counts: Float64Array,
): number {
  // Varints of one byte (most deltas and counts) are read inline; longer ones, and a byte past the
  // end of `src` (undefined, which fails the `< 0x80` test), go through readVarU32 / readVarCount.
  const cursor: Cursor = { p: start };
  let countSum = readVarCount(src, cursor, 0);
  counts[0] = countSum;
  let p = cursor.p;
  for (let r = 1; r < recordCount; r++) {
    if (p >= end) throw new DecodeFailure(r, 'records end before the block record count is reached');
    const base = r * order;
    const prev = base - order;
    const shared = src[p++];
    if (shared >= order) throw new DecodeFailure(r, `shared prefix ${shared} is not below the order ${order}`);
    for (let j = 0; j < shared; j++) keys[base + j] = keys[prev + j];
    let delta = src[p];
    if (delta < 0x80) p++;
    else {
      cursor.p = p;
      delta = readVarU32(src, cursor, r);
      p = cursor.p;
    }
    const id = keys[prev + shared] + delta;
    if (!(delta >= 1 && id <= U32_MAX)) throw new DecodeFailure(r, `id delta ${delta} at position ${shared} is not in 1..${U32_MAX - keys[prev + shared]}`);
    keys[base + shared] = id;
    for (let j = shared + 1; j < order; j++) {
      const b = src[p];
      if (b < 0x80) {
        keys[base + j] = b;
        p++;
      } else {
        cursor.p = p;
        keys[base + j] = readVarU32(src, cursor, r);
        p = cursor.p;
      }
    }
    let count = src[p];
    if (count >= 1 && count < 0x80) p++;
    else {
      cursor.p = p;
      count = readVarCount(src, cursor, r);
      p = cursor.p;
    }
    counts[r] = count;
    countSum += count;
    if (p > end) throw new DecodeFailure(r, 'record runs past the end of the block');
  }
  if (p !== end) throw new DecodeFailure(recordCount - 1, `records end at byte ${p - start} of ${end - start}`);
  return countSum;
}

/**
 * Compares row `a` at `aOffset` with row `b` at `bOffset`, both of `order` ids, lexicographically:
 * negative, 0 or positive.
 */
export function compareRows(a: Uint32Array, aOffset: number, b: Uint32Array, bOffset: number, order: number): number {
  for (let j = 0; j < order; j++) {
    const x = a[aOffset + j];
    const y = b[bOffset + j];
    if (x !== y) return x < y ? -1 : 1;
  }
  return 0;
}

/** One decoded block. */
export interface DecodedBlock {
  keys: Uint32Array;
  counts: Float64Array;
  recordCount: number;
  countSum: number;
}

/** Where `encodeBlockValue` encodes before copying out the exact bytes (grown on demand). */
let valueScratch = Buffer.allocUnsafe(0);

/**
 * Encodes the rows [first, first+recordCount) of `keys`/`counts` as one self-contained block
 * (a fresh buffer of exactly its size).
 */
export function encodeBlockValue(keys: Uint32Array, counts: ArrayLike<number>, first: number, recordCount: number, order: number): Buffer {
  const bytesMax = blockBytesMax(order, recordCount);
  if (valueScratch.length < bytesMax) valueScratch = Buffer.allocUnsafe(bytesMax);
  const scratch = valueScratch;
  const end = encodeBlock(scratch, 0, keys, counts, first, recordCount, order);
  return Buffer.from(scratch.subarray(0, end));
}

/**
 * Decodes a self-contained block (all of `src`), verifying its checksum and lengths first; into
 * `into`'s arrays when given (the result's arrays are then views of them, valid until the next
 * decoding into the same buffers), else into new ones.
 * Throws DecodeFailure (record index −1 for block-level damage) on any inconsistency.
 */
/** Arrays a reader lends `decodeBlockValue` to decode into, reused from one block to the next
 *  (grown when a block needs more). */
export interface BlockBuffers {
  keys: Uint32Array;
  counts: Float64Array;
}

export function decodeBlockValue(src: Uint8Array, order: number, recordsMax: number, into?: BlockBuffers): DecodedBlock {
  const headerBytes = blockHeaderBytes(order);
  if (src.length < headerBytes + 1) throw new DecodeFailure(-1, `block of ${src.length} bytes is shorter than its header`);
  const view = new DataView(src.buffer, src.byteOffset, src.byteLength);
  const storedCrc = view.getUint32(0, true);
  const recordCount = view.getUint32(4, true);
  const recordBytes = view.getUint32(8, true);
  if (recordCount < 1 || recordCount > recordsMax) throw new DecodeFailure(-1, `record count ${recordCount} outside 1..${recordsMax}`);
  if (headerBytes + recordBytes !== src.length) throw new DecodeFailure(-1, `record bytes ${recordBytes} disagree with the block size ${src.length}`);
  const computedCrc = crc32(src.subarray(4));
  if (computedCrc !== storedCrc) throw new DecodeFailure(-1, `checksum mismatch (stored ${storedCrc.toString(16)}, computed ${computedCrc.toString(16)})`);
  let keys: Uint32Array;
  let counts: Float64Array;
  if (into === undefined) {
    keys = new Uint32Array(recordCount * order);
    counts = new Float64Array(recordCount);
  } else {
    if (into.keys.length < recordCount * order) into.keys = new Uint32Array(recordsMax * order);
    if (into.counts.length < recordCount) into.counts = new Float64Array(recordsMax);
    keys = into.keys.subarray(0, recordCount * order);
    counts = into.counts.subarray(0, recordCount);
  }
  for (let j = 0; j < order; j++) keys[j] = view.getUint32(BLOCK_HEADER_FIXED_BYTES + 4 * j, true);
  const countSum = decodeRecords(src, headerBytes, src.length, order, recordCount, keys, counts);
  return { keys, counts, recordCount, countSum };
}
