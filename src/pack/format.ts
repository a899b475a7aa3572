/**
 * The model file format (docs/model-file.md): constants and small helpers shared by the writer
 * (writer.ts) and the reader (reader.ts). The spec is the authority; this file only names its numbers.
 */

import { endianness } from 'node:os';
import { QuernError } from '../errors.ts';

/** Magic: ASCII `QRNMODEL`. */
export const MODEL_MAGIC = Buffer.from('QRNMODEL', 'latin1');

/** Major version: a reader reads exactly its own major version. Version 2 (bit-packed word ids and
 *  children, the section table and the checksums at the end so that a writer never seeks back)
 *  replaced version 1. */
export const MODEL_VERSION_MAJOR = 2;
/** Minor version: a reader reads every minor version of its major; newer ones may add section kinds. */
export const MODEL_VERSION_MINOR = 0;

/** Header size in bytes (offset 0). */
export const HEADER_BYTES = 128;
/** Bytes of one section table entry; the table follows the last section. */
export const SECTION_ENTRY_BYTES = 32;
/** Bytes of the footer, the last bytes of the file: where the section table is, and its checksum. */
export const FOOTER_BYTES = 32;
/** Rows of a block of the children section: each block stores the absolute children start of its
 *  first row, and each row its offset from there (docs/model-file.md, "Children"). */
export const CHILD_BLOCK_ROWS = 64;
/** log2 CHILD_BLOCK_ROWS: the block of row r is r >>> CHILD_BLOCK_SHIFT. */
export const CHILD_BLOCK_SHIFT = 6;
/** Every section starts at a multiple of this many bytes. */
export const SECTION_ALIGN_BYTES = 8;

/** Byte offsets of the header fields (docs/model-file.md, "Header"). */
export const H = {
  magic: 0,
  versionMajor: 8,
  versionMinor: 10,
  headerBytes: 12,
  reserved16: 16,
  flags: 24,
  order: 28,
  vocabularySize: 32,
  eosId: 36,
  unkId: 40,
  valueEncoding: 44,
  wordIdBits: 45,
  reserved46: 46,
  log10UnseenContextWeight: 48,
  reserved56: 56,
  ngramCounts: 64,
  reserved120: 120,
  headerCrc: 124,
} as const;

/** Byte offsets of the footer fields, from the footer's start (docs/model-file.md, "Footer"). */
export const F = {
  tableOffset: 0,
  sectionCount: 8,
  tableCrc: 12,
  fileBytes: 16,
  reserved24: 24,
  footerCrc: 28,
} as const;

/** Header flag bits. */
export const FLAG_NORMALISED = 1;
export const FLAGS_KNOWN = FLAG_NORMALISED;

/** How log10 probabilities and back-off weights are stored. */
export const ValueEncoding = { Float32: 1, Float64: 2, Quantised8: 3, Quantised16: 4 } as const;
export type ValueEncoding = (typeof ValueEncoding)[keyof typeof ValueEncoding];

/** Bytes per stored value of an encoding. */
export function valueBytes(encoding: ValueEncoding): number {
  switch (encoding) {
    case ValueEncoding.Float32: return 4;
    case ValueEncoding.Float64: return 8;
    case ValueEncoding.Quantised8: return 1;
    case ValueEncoding.Quantised16: return 2;
  }
}

/** Codes of a quantised encoding (0 for a float one). */
export function codeBits(encoding: ValueEncoding): 0 | 8 | 16 {
  return encoding === ValueEncoding.Quantised8 ? 8 : encoding === ValueEncoding.Quantised16 ? 16 : 0;
}

/** Names of the encodings, as `quern info` prints them. */
export const ENCODING_NAMES: Record<number, string> = {
  [ValueEncoding.Float32]: 'float32',
  [ValueEncoding.Float64]: 'float64',
  [ValueEncoding.Quantised8]: '8-bit quantised',
  [ValueEncoding.Quantised16]: '16-bit quantised',
};

/** Section kinds (docs/model-file.md, "Sections"). */
export const SectionKind = {
  Description: 1,
  Fingerprint: 2,
  VocabularyWords: 3,
  VocabularyOffsets: 4,
  VocabularyHash: 5,
  Words: 6,
  Probabilities: 7,
  BackOffs: 8,
  Children: 9,
  ProbabilityCodebook: 10,
  BackOffCodebook: 11,
} as const;
export type SectionKind = (typeof SectionKind)[keyof typeof SectionKind];

/** The highest section kind this reader knows. */
export const SECTION_KIND_MAX = SectionKind.BackOffCodebook;

/** True for the kinds that belong to one order (their table entry names it). */
export function isPerOrderKind(kind: number): boolean {
  return kind >= SectionKind.Words && kind <= SectionKind.BackOffCodebook;
}

const KIND_NAMES: Record<number, string> = {
  [SectionKind.Description]: 'description',
  [SectionKind.Fingerprint]: 'fingerprint',
  [SectionKind.VocabularyWords]: 'vocabulary words',
  [SectionKind.VocabularyOffsets]: 'vocabulary offsets',
  [SectionKind.VocabularyHash]: 'vocabulary hash',
  [SectionKind.Words]: 'word ids',
  [SectionKind.Probabilities]: 'log10 probabilities',
  [SectionKind.BackOffs]: 'log10 back-off weights',
  [SectionKind.Children]: 'children',
  [SectionKind.ProbabilityCodebook]: 'probability codebook',
  [SectionKind.BackOffCodebook]: 'back-off codebook',
};

/** A section's name for messages: `log10 probabilities of order 2`, `section kind 42`. */
export function sectionName(kind: number, order: number): string {
  const name = KIND_NAMES[kind] ?? `section kind ${kind}`;
  return order > 0 ? `${name} of order ${order}` : name;
}

/** `value` rounded up to a multiple of SECTION_ALIGN_BYTES. */
export function alignUp(value: number): number {
  return Math.ceil(value / SECTION_ALIGN_BYTES) * SECTION_ALIGN_BYTES;
}

/** Bits of an unsigned integer up to `max`: 0 for 0, else ⌊log2 max⌋ + 1 (at most 32). */
export function bitsFor(max: number): number {
  let bits = 0;
  while (bits < 32 && 2 ** bits <= max) bits++;
  return bits;
}

/** Bytes of `count` values of `bits` bits packed back to back (src/pack/bits.ts): the ⌊count·bits/32⌋ + 1
 *  u32 words that hold them, one spare zero u32, rounded up to a multiple of 8 bytes. */
export function packedBytes(count: number, bits: number): number {
  return 8 * Math.ceil((Math.floor((count * bits) / 32) + 2) / 2);
}

/** Blocks of the children section of an order of `rows` rows (rows + 1 entries). */
export function childBlocks(rows: number): number {
  return Math.floor(rows / CHILD_BLOCK_ROWS) + 1;
}

/** Byte offset, within a children section, of its packed offsets (after the width and the bases). */
export function childOffsetsStart(rows: number): number {
  return alignUp(8 + 4 * childBlocks(rows));
}

/** Slots of the vocabulary hash table for V + 1 ids: the smallest power of two ≥ 2·(V + 1), at least 8. */
export function hashSlotsFor(idCount: number): number {
  let slots = 8;
  while (slots < 2 * idCount) slots *= 2;
  return slots;
}

/**
 * FNV-1a, 32 bits, over bytes [start, end) of `bytes`: h = 0x811C9DC5; for each byte,
 * h = (h XOR byte) · 0x01000193 mod 2^32. The vocabulary hash (docs/model-file.md) uses it.
 */
export function fnv1a32(bytes: Uint8Array, start: number, end: number): number {
  let hash = 0x811c9dc5;
  for (let i = start; i < end; i++) hash = Math.imul(hash ^ bytes[i], 0x01000193);
  return hash >>> 0;
}

/** What the description section (JSON) holds. */
export interface ModelDescriptionJson {
  parameters: unknown;
  cutoffs: number[];
  vocabularyCap: unknown;
}

/** Model files are little-endian and read through typed-array views, which use the machine's byte
 *  order: refuses to run on a big-endian machine rather than misread every number. */
export function requireLittleEndian(): void {
  if (endianness() !== 'LE') {
    throw new QuernError('config', 'model files are little-endian and are read through typed-array views; this machine is big-endian, which Quern does not support');
  }
}
