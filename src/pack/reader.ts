/**
 * The model-file reader and query library (docs/model-file.md).
 *
 * `openModel` reads the file section by section, each into a buffer of its own (DESIGN.md: a
 * buffer holds at most 4 GiB here; no section exceeds PACK_SECTION_BYTES_MAX = 2 GiB) — or, for the
 * WebAssembly lookups (lookup-wasm.ts), into its place in one WebAssembly memory when the whole file
 * fits the 4 GiB such a memory addresses, each section a Buffer view of it — in pieces that
 * the thread pool reads ahead while this thread checksums those that arrived, and checks before it
 * uses a byte: the header (magic, version, CRC, fields in range), the section table (CRC, every
 * offset and length inside the file, sections contiguous and aligned, lengths as the header's counts
 * require), each section's CRC and zero padding, the vocabulary and its hash table. Lookups stay
 * inside their arrays whatever the sections hold (children ranges clamped to the next order, codebooks
 * extended to every code), so a crafted file with valid checksums gives at worst wrong numbers. With
 * `checkStructure`, it also checks the structure of each order as soon as its sections are verified
 * (children ranges ascending and inside the next order, word ids in range and ascending within a
 * context, codes inside their codebook). A file that fails any check is a QuernError 'corrupt'
 * naming the file and the section; nothing is allocated beyond the file's own size.
 *
 * Queries then read typed-array views of those buffers, decoding only the entries they touch:
 *
 *   rows of order n are grouped by context; order 1 has one row per id (row = id);
 *   children_n(r) .. children_n(r+1) = the rows of order n+1 whose context is row r of order n,
 *                                       children_n(r) = bases_n[r / 64] + offsets_n[r] (bit-packed);
 *   words_n[row]                     = the last word id of a row of order n ≥ 2 (bit-packed,
 *                                       ascending within a context);
 *   prob_n[row], backOff_n[row]      = log10 p(w | h) and log10 bow(h w), as floats or codebook codes.
 *
 * A lookup of p(w | h) finds the row of h at each order by descending from its first word (one
 * search per word, each within one context's children), then searches w among h's children; the
 * incremental state (`newState`/`step` without allocation, or `beginState`/`advance` with immutable
 * states) keeps the rows of every suffix of the history, so a decoder's lookup is one search per
 * order it backs off through, plus one per shorter order to keep the state's rows. `step`'s state
 * also keeps each row's children range, decoded when the row is found: the next word's searches
 * start at once, and the range's memory access overlaps the rest of the lookup that found the row.
 */
import { promises as fsp } from 'node:fs';
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import { openForReading, readFullyAt } from '../job/file-read.ts';
import { BOS, BOS_ID, EOS, UNK, type VocabCap } from '../corpus/vocabulary.ts';
import { isNormalizeOptions, type NormalizeOptions } from '../corpus/types.ts';
import type { LanguageModel, MethodParameters, ModelOrder } from '../estimate/model.ts';
import type { ModelRowBatch, ModelSource } from '../estimate/model-source.ts';
import {
  ORDER_MAX, PACK_DESCRIPTION_BYTES_MAX, PACK_FINGERPRINT_BYTES_MAX, PACK_READ_BYTES_MAX, PACK_ROWS_MAX, PACK_SECTION_BYTES_MAX, PACK_SECTIONS_MAX, VOCAB_TYPES_MAX,
} from '../limits.ts';
import { maskFor, unpack } from './bits.ts';
import {
  LookupWasm, STATE_BLOCK_INTS, STATE_ENDS_AT, STATE_IDS_AT, STATE_ORDER_AT, STATE_ROWS_AT, STATE_STARTS_AT, wasmLayout, wasmMemory, type WasmLayout,
} from './lookup-wasm.ts';
import {
  alignUp, bitsFor, CHILD_BLOCK_ROWS, CHILD_BLOCK_SHIFT, childBlocks, childOffsetsStart, codeBits, ENCODING_NAMES, F, FLAG_NORMALISED, FLAGS_KNOWN, fnv1a32, FOOTER_BYTES, H, hashSlotsFor,
  HEADER_BYTES, isPerOrderKind, MODEL_MAGIC, MODEL_VERSION_MAJOR, MODEL_VERSION_MINOR, packedBytes, requireLittleEndian, SECTION_ENTRY_BYTES, SECTION_KIND_MAX,
  SectionKind, sectionName, ValueEncoding, valueBytes,
} from './format.ts';

/** A section as listed in the section table. */
export interface SectionInfo {
  kind: number;
  /** 1..N for the sections of one order, 0 for the file-wide ones. */
  order: number;
  name: string;
  /** Byte offset in the file. */
  offset: number;
  /** Length in bytes (without padding). */
  bytes: number;
  crc32: number;
}

/** Result of a lookup. */
export interface PackedLookup {
  /** log10 p(w | h) (a log10 score for a model that is not normalised); −∞ for probability 0. */
  log10Prob: number;
  /** The order of the n-gram that answered: the longest h w found in the model. */
  order: number;
}

/**
 * A decoder state: the history after which the next word is predicted. It holds the last
 * min(N − 1, i) token ids (DESIGN.md: no extra `<s>` padding) and, for the model's use, the rows of
 * their suffixes. States are immutable: `advance` returns a new one, so a decoder may extend one
 * state with several words.
 */
export class ModelState {
  /**
   * @param length the number of history ids, min(N − 1, i)
   * @param data   the history ids, oldest first (`<s>` first at the start of a sentence), then
   *               `length` rows: the k-th (k = 1..length) is the row at order k of the last k
   *               history ids, −1 when the model has no such n-gram
   */
  constructor(readonly length: number, readonly data: readonly number[]) {}

  /** The last min(N − 1, i) token ids, oldest first. */
  get history(): number[] {
    return this.data.slice(0, this.length);
  }
}

/**
 * A decoder state that `step` changes in place, so that a decoder's loop allocates nothing per
 * word: the history after which the next word is predicted (the last min(N − 1, i) ids) and the
 * rows of its suffixes. Create it with `newState`; `resetState` starts a new sentence.
 */
export class DecoderState {
  /** @internal The number of history ids, min(N − 1, i). */
  length = 0;
  /** @internal History ids, oldest first. */
  readonly ids: Int32Array;
  /** @internal rows[k] (k = 1..length): the row at order k of the last k history ids, −1 when there
   *  is none (rows of an order are below 2^31: every order's values fit a 2 GiB section). */
  readonly rows: Int32Array;
  /** @internal For each k with rows[k] ≥ 0: the children of that row, rows [starts[k], ends[k]) of
   *  order k + 1, decoded when the row was found (the next word's search needs them first). */
  readonly starts: Int32Array;
  readonly ends: Int32Array;
  /** @internal ids, rows, starts and ends, and the answering order of the WebAssembly lookups, in
   *  one block (lookup-wasm.ts): in the WebAssembly memory of `owner` at byte `at`, or of its own. */
  readonly block: Int32Array;
  /** @internal The WebAssembly lookups whose memory holds the block (null: none). */
  readonly owner: LookupWasm | null;
  /** @internal The block's byte address in the owner's memory (−1: none). */
  readonly at: number;
  /** The order of the n-gram that answered the last `step` (0 before the first). */
  order = 0;
  /** @internal `stepBatch`'s scratch: found[k] = the row of order k + 1 extending rows[k] with the
   *  word being scored, −1 when none; `answer` = the highest such k (0: none, order 1 answers). */
  readonly found = new Int32Array(ORDER_MAX + 1);
  answer = 0;
  /** @internal The `stepBatch` call that last took this state (a state twice in one call is refused). */
  batch = 0;

  /** A state of no model yet; `PackedModel.newState` gives one ready for a model. */
  constructor(owner: LookupWasm | null = null, at = -1) {
    this.owner = owner;
    this.at = at;
    this.block = owner === null ? new Int32Array(STATE_BLOCK_INTS) : owner.block(at, this);
    this.ids = this.block.subarray(STATE_IDS_AT, STATE_IDS_AT + ORDER_MAX);
    this.rows = this.block.subarray(STATE_ROWS_AT, STATE_ROWS_AT + ORDER_MAX + 1);
    this.starts = this.block.subarray(STATE_STARTS_AT, STATE_STARTS_AT + ORDER_MAX + 1);
    this.ends = this.block.subarray(STATE_ENDS_AT, STATE_ENDS_AT + ORDER_MAX + 1);
  }

  /** The last min(N − 1, i) token ids, oldest first. */
  get history(): number[] {
    return Array.from(this.ids.subarray(0, this.length));
  }
}

/** The children of one context row of a history (`PackedModel.continuations`). */
export interface ContinuationRange {
  /** Their order (the context's + 1). */
  order: number;
  start: number;
  end: number;
  /** log10 back-off weights added to each child's log10 p. */
  base: number;
}

/** Result of `advance`: the word's lookup and the state after it. */
export interface AdvanceResult extends PackedLookup {
  state: ModelState;
}

/** One predicted token of `scoreSentence`. */
export interface TokenScore {
  /** The token as given (`</s>` for the end of the sentence). */
  word: string;
  /** The id it was scored as: its vocabulary id, or `<unk>`'s for an OOV token. */
  id: number;
  /** True when the token is outside the vocabulary (a literal `<s>`, `</s>` or `<unk>` included). */
  oov: boolean;
  log10Prob: number;
  /** The order of the n-gram that answered. */
  order: number;
}

/** Result of `scoreSentence`. */
export interface SentenceScore {
  /** Every predicted token, `</s>` last. */
  tokens: TokenScore[];
  /** Σ log10 p over the tokens that are not OOV. */
  log10Prob: number;
  /** Σ log10 p over all tokens, OOVs scored as `<unk>`. */
  log10ProbWithUnk: number;
  /** Tokens outside the vocabulary. */
  oov: number;
}

type ValueArray = Float32Array | Float64Array | Uint8Array | Uint16Array;

/** The arrays of one order. */
interface Level {
  rows: number;
  /** Last word id of each row, bit-packed; null at order 1 (row = id). */
  words: Uint32Array | null;
  prob: ValueArray;
  probCodebook: Float64Array | null;
  /** Null at the highest order. */
  backOff: ValueArray | null;
  backOffCodebook: Float64Array | null;
  /** Children start of every 64th row; null at the highest order. */
  childBases: Uint32Array | null;
  /** Offset of each of the rows + 1 entries from its block's base, `childBits` wide; null at the highest order. */
  childOffsets: Uint32Array | null;
  childBits: number;
}

/** Options of `openModel`. */
export interface OpenOptions {
  /** Also check the structure of every order (default false): children ranges ascending and inside
   *  the next order, word ids ascending within each context and in 1..V, codes inside their
   *  codebook — a pass over every n-gram, about as long as reading the file. Without it, `openModel`
   *  verifies every checksum, the header, the section table, the vocabulary and what lookups need to
   *  stay bounded, so a crafted file whose checksums match its damage gives at worst wrong numbers
   *  (never a crash, a hang, a read outside its arrays or a huge allocation); `toLanguageModel`
   *  (export) runs the check first when it has not run. `quern info MODEL --check` runs it. */
  checkStructure?: boolean;
  /** Read the sections into SharedArrayBuffers (default false), so that `shareable()` can hand the
   *  model to worker threads (`modelFromShared`), which then answer from the same memory. (The
   *  WebAssembly lookups' memory is a shared one in any case.) */
  shared?: boolean;
  /** Which lookups `step` runs (default 'auto'): 'wasm', WebAssembly over one (shared) memory
   *  that holds the file's sections (the same numbers, ~1.4× the lookups per second on the 24 MB
   *  benchmark model; worker threads given the model by `shareable` run it too); 'js', JavaScript
   *  over a buffer per section; 'auto', 'wasm' unless the model needs more than
   *  LOOKUP_WASM_MEMORY_BYTES_MAX (4 GiB) or no such memory can be had. 'wasm' where it cannot be
   *  is a QuernError 'limit' saying why. `PackedModel.engine` tells which runs. */
  engine?: LookupEngine;
}

/** `OpenOptions.engine`. */
export type LookupEngine = 'auto' | 'wasm' | 'js';

/**
 * A model opened with `{ shared: true }`, as a worker thread receives it (structured-clone safe:
 * the sections are SharedArrayBuffers, not copied). `modelFromShared` makes it a PackedModel again
 * without reading or checksumming anything: the thread that opened the file verified it.
 */
export interface SharedModel {
  file: string;
  fileBytes: number;
  header: Header;
  sections: SectionInfo[];
  /** Each known section: its key (`kind:order`) and its bytes. */
  data: Array<{ key: string; buffer: SharedArrayBuffer; byteOffset: number; byteLength: number }>;
  structureChecked: boolean;
  /** The WebAssembly memory the sections lie in (a shared one), when the WebAssembly lookups answer. */
  wasm?: SharedWasm;
}

/** A model's WebAssembly memory and its layout (lookup-wasm.ts). */
interface SharedWasm {
  memory: WebAssembly.Memory;
  layout: WasmLayout;
}

/** The model `shared` describes, over the same memory (SharedModel); with the WebAssembly lookups
 *  when the opener had them, each thread with its own instance and state blocks. */
export function modelFromShared(shared: SharedModel): PackedModel {
  const data = new Map<string, Buffer>();
  const wasm = shared.wasm;
  for (const { key, buffer, byteOffset, byteLength } of shared.data) data.set(key, Buffer.from(wasm === undefined ? buffer : wasm.memory.buffer, byteOffset, byteLength));
  return new PackedModel(shared.file, shared.fileBytes, shared.header, shared.sections, data, shared.structureChecked, wasm ?? null, true);
}

/**
 * Opens a model file (docs/model-file.md), reading every section and verifying its checksum (and,
 * with `checkStructure`, the structure of every order). Throws QuernError
 * 'io' when the file cannot be read and 'corrupt' (naming the file and the section) when it is not
 * a valid model file of a version this reader reads.
 */
export async function openModel(filePath: string, options: OpenOptions = {}): Promise<PackedModel> {
  requireLittleEndian();
  const { handle, bytes: fileBytes } = await openForReading(filePath);
  try {
    return await readModel(handle, filePath, fileBytes, options.checkStructure ?? false, options.shared ?? false, options.engine ?? 'auto');
  } finally {
    await handle.close().catch(() => undefined);
  }
}

/** A corrupt-file error: `file: where: what`. */
function corrupt(file: string, where: string, what: string): QuernError {
  return new QuernError('corrupt', `${file}: ${where}: ${what}`, { location: { file } });
}

/** Reads exactly buffer.length bytes at `position` (in calls of at most PACK_READ_BYTES_MAX). */
async function readAt(handle: fsp.FileHandle, file: string, where: string, buffer: Buffer, position: number): Promise<void> {
  await readFullyAt(handle, file, buffer, position, (endedAt) =>
    corrupt(file, where, `the file ends at byte ${endedAt}, before the ${buffer.length} bytes at byte ${position} (did it change while being read?)`));
}

/** A u64 field that must be a safe integer. */
function u64(buffer: Buffer, offset: number): number {
  const value = buffer.readBigUInt64LE(offset);
  return value <= BigInt(Number.MAX_SAFE_INTEGER) ? Number(value) : Number.MAX_SAFE_INTEGER;
}

/** The header's fields, as read (docs/model-file.md). */
export interface Header {
  versionMinor: number;
  normalised: boolean;
  order: number;
  size: number;
  eosId: number;
  unkId: number;
  encoding: ValueEncoding;
  wordIdBits: number;
  log10UnseenContextWeight: number;
  rows: number[];
}

function versionMessage(major: number, minor: number): string {
  return `format version ${major}.${minor}; this reader reads version ${MODEL_VERSION_MAJOR}.x (${major > MODEL_VERSION_MAJOR ? 'a newer Quern wrote it' : 'an older Quern wrote it; repack the model'})`;
}

function parseHeader(file: string, header: Buffer, fileBytes: number): Header {
  const where = 'header';
  if (fileBytes < MODEL_MAGIC.length || !header.subarray(0, MODEL_MAGIC.length).equals(MODEL_MAGIC)) {
    throw corrupt(file, where, `not a Quern model file (its first bytes are not the magic "QRNMODEL")`);
  }
  if (fileBytes < H.versionMinor + 2) throw corrupt(file, where, `the file is ${fileBytes} bytes, shorter than the ${HEADER_BYTES}-byte header`);
  const major = header.readUInt16LE(H.versionMajor);
  const minor = header.readUInt16LE(H.versionMinor);
  if (major !== MODEL_VERSION_MAJOR) throw corrupt(file, where, versionMessage(major, minor));
  if (fileBytes < HEADER_BYTES) throw corrupt(file, where, `the file is ${fileBytes} bytes, shorter than the ${HEADER_BYTES}-byte header`);
  const crc = crc32(header.subarray(0, H.headerCrc));
  if (crc !== header.readUInt32LE(H.headerCrc)) throw corrupt(file, where, `checksum mismatch (stored 0x${hex(header.readUInt32LE(H.headerCrc))}, computed 0x${hex(crc)})`);
  if (header.readUInt32LE(H.headerBytes) !== HEADER_BYTES) throw corrupt(file, where, `header size ${header.readUInt32LE(H.headerBytes)}, expected ${HEADER_BYTES}`);
  if (header.readBigUInt64LE(H.reserved16) !== 0n || header.readUInt16LE(H.reserved46) !== 0 || header.readBigUInt64LE(H.reserved56) !== 0n || header.readUInt32LE(H.reserved120) !== 0) {
    throw corrupt(file, where, 'reserved bytes are not zero');
  }
  const flags = header.readUInt32LE(H.flags);
  if ((flags & ~FLAGS_KNOWN) !== 0) throw corrupt(file, where, `unknown flags 0x${hex(flags)}`);
  const order = header.readUInt32LE(H.order);
  if (order < 1 || order > ORDER_MAX) throw corrupt(file, where, `order ${order} outside [1, ${ORDER_MAX}]`);
  const size = header.readUInt32LE(H.vocabularySize);
  if (size < 2 || size + 1 > VOCAB_TYPES_MAX) throw corrupt(file, where, `vocabulary size ${size} outside [2, ${VOCAB_TYPES_MAX - 1}]`);
  const eosId = header.readUInt32LE(H.eosId);
  const unkId = header.readUInt32LE(H.unkId);
  if (eosId < 1 || eosId > size || unkId < 1 || unkId > size || eosId === unkId) throw corrupt(file, where, `</s> id ${eosId} and <unk> id ${unkId} must be distinct ids in [1, ${size}]`);
  const encoding = header.readUInt8(H.valueEncoding);
  if (ENCODING_NAMES[encoding] === undefined) throw corrupt(file, where, `unknown value encoding ${encoding}`);
  const wordIdBits = header.readUInt8(H.wordIdBits);
  if (wordIdBits !== bitsFor(size)) throw corrupt(file, where, `word ids of ${wordIdBits} bits; a vocabulary of ${size} takes ${bitsFor(size)}`);
  const log10UnseenContextWeight = header.readDoubleLE(H.log10UnseenContextWeight);
  if (!Number.isFinite(log10UnseenContextWeight)) throw corrupt(file, where, `the unseen-context weight ${log10UnseenContextWeight} is not finite`);
  const rows: number[] = [];
  for (let n = 1; n <= ORDER_MAX; n++) {
    const count = u64(header, H.ngramCounts + 8 * (n - 1));
    if (n > order) {
      if (count !== 0) throw corrupt(file, where, `${count} n-grams of order ${n}, above the model's order ${order}`);
      continue;
    }
    if (count > PACK_ROWS_MAX) throw corrupt(file, where, `${count} n-grams of order ${n}, over the limit of ${PACK_ROWS_MAX}`);
    if (n === 1 && count !== size + 1) throw corrupt(file, where, `${count} rows of order 1; a vocabulary of ${size} has ${size + 1} (every id, <s> included)`);
    rows.push(count);
  }
  return {
    versionMinor: minor,
    normalised: (flags & FLAG_NORMALISED) !== 0,
    order,
    size,
    eosId,
    unkId,
    encoding: encoding as ValueEncoding,
    wordIdBits,
    log10UnseenContextWeight,
    rows,
  };
}

/** The footer: where the section table is, how many entries it has, and its checksum. */
interface Footer {
  tableOffset: number;
  sectionCount: number;
  tableCrc: number;
}

function parseFooter(file: string, footer: Buffer, fileBytes: number): Footer {
  const where = 'footer';
  const crc = crc32(footer.subarray(0, F.footerCrc));
  if (crc !== footer.readUInt32LE(F.footerCrc)) {
    throw corrupt(file, where, `checksum mismatch (stored 0x${hex(footer.readUInt32LE(F.footerCrc))}, computed 0x${hex(crc)}): the file was truncated, extended or damaged at its end`);
  }
  const storedBytes = u64(footer, F.fileBytes);
  if (storedBytes !== fileBytes) throw corrupt(file, where, `the file is ${fileBytes} bytes but its footer says ${storedBytes}: it was ${fileBytes < storedBytes ? 'truncated' : 'extended'}`);
  if (footer.readUInt32LE(F.reserved24) !== 0) throw corrupt(file, where, 'reserved bytes are not zero');
  const sectionCount = footer.readUInt32LE(F.sectionCount);
  if (sectionCount < 1 || sectionCount > PACK_SECTIONS_MAX) throw corrupt(file, where, `section count ${sectionCount} outside [1, ${PACK_SECTIONS_MAX}]`);
  const tableOffset = u64(footer, F.tableOffset);
  const expected = fileBytes - FOOTER_BYTES - sectionCount * SECTION_ENTRY_BYTES;
  if (tableOffset !== expected || expected < HEADER_BYTES) {
    throw corrupt(file, where, `the section table of ${sectionCount} entries is at byte ${tableOffset}; it must end where the footer starts, at byte ${expected}, after the ${HEADER_BYTES}-byte header`);
  }
  return { tableOffset, sectionCount, tableCrc: footer.readUInt32LE(F.tableCrc) };
}

function hex(value: number): string {
  return value.toString(16).padStart(8, '0');
}

/** The length a known section must have, given the header: a number, or a range when it depends on
 *  the section's own content (a children section's width is checked once it is read). */
function expectedLength(header: Header, kind: number, order: number): number | { min: number; max: number } {
  const values = valueBytes(header.encoding);
  const rows = header.rows[order - 1];
  switch (kind) {
    case SectionKind.Description: return { min: 2, max: PACK_DESCRIPTION_BYTES_MAX };
    case SectionKind.Fingerprint: return { min: 0, max: PACK_FINGERPRINT_BYTES_MAX };
    case SectionKind.VocabularyWords: return { min: 0, max: PACK_SECTION_BYTES_MAX };
    case SectionKind.VocabularyOffsets: return 4 * (header.size + 2);
    case SectionKind.VocabularyHash: return 4 * hashSlotsFor(header.size + 1);
    case SectionKind.Words: return packedBytes(rows, header.wordIdBits);
    case SectionKind.Probabilities:
    case SectionKind.BackOffs: return values * rows;
    case SectionKind.Children: return { min: childOffsetsStart(rows), max: Math.min(PACK_SECTION_BYTES_MAX, childOffsetsStart(rows) + packedBytes(rows + 1, 32)) };
    default: return { min: 8, max: 8 * 2 ** codeBits(header.encoding) };
  }
}

/** Which known sections a file of this header must hold: key `kind:order`. */
function requiredSections(header: Header): Array<[number, number]> {
  const required: Array<[number, number]> = [
    [SectionKind.Description, 0], [SectionKind.Fingerprint, 0], [SectionKind.VocabularyWords, 0], [SectionKind.VocabularyOffsets, 0], [SectionKind.VocabularyHash, 0],
  ];
  const quantised = codeBits(header.encoding) > 0;
  for (let n = 1; n <= header.order; n++) {
    if (n >= 2) required.push([SectionKind.Words, n]);
    required.push([SectionKind.Probabilities, n]);
    if (quantised) required.push([SectionKind.ProbabilityCodebook, n]);
    if (n < header.order) {
      required.push([SectionKind.BackOffs, n], [SectionKind.Children, n]);
      if (quantised) required.push([SectionKind.BackOffCodebook, n]);
    }
  }
  return required;
}

async function readModel(handle: fsp.FileHandle, file: string, fileBytes: number, checkStructure: boolean, shared: boolean, engine: LookupEngine): Promise<PackedModel> {
  if (!(engine === 'auto' || engine === 'wasm' || engine === 'js')) throw new QuernError('config', `engine must be 'auto', 'wasm' or 'js' (got ${String(engine)})`);
  const headerBytes = Buffer.alloc(HEADER_BYTES);
  await readAt(handle, file, 'header', headerBytes.subarray(0, Math.min(HEADER_BYTES, fileBytes)), 0);
  const header = parseHeader(file, headerBytes, fileBytes);

  // Footer, then the section table it points at.
  if (fileBytes < HEADER_BYTES + FOOTER_BYTES) throw corrupt(file, 'footer', `the file is ${fileBytes} bytes, shorter than the ${HEADER_BYTES}-byte header and the ${FOOTER_BYTES}-byte footer`);
  const footerBytes = Buffer.alloc(FOOTER_BYTES);
  await readAt(handle, file, 'footer', footerBytes, fileBytes - FOOTER_BYTES);
  const footer = parseFooter(file, footerBytes, fileBytes);
  const table = Buffer.alloc(footer.sectionCount * SECTION_ENTRY_BYTES);
  await readAt(handle, file, 'section table', table, footer.tableOffset);
  const tableCrc = crc32(table);
  if (tableCrc !== footer.tableCrc) throw corrupt(file, 'section table', `checksum mismatch (footer says 0x${hex(footer.tableCrc)}, computed 0x${hex(tableCrc)})`);
  const sections: SectionInfo[] = [];
  const known = new Map<string, SectionInfo>();
  let position = HEADER_BYTES;
  for (let index = 0; index < footer.sectionCount; index++) {
    const entry = index * SECTION_ENTRY_BYTES;
    const kind = table.readUInt32LE(entry);
    const order = table.readUInt32LE(entry + 4);
    const offset = u64(table, entry + 8);
    const bytes = u64(table, entry + 16);
    const name = sectionName(kind, order);
    const where = `section ${index} (${name})`;
    const isKnown = kind >= 1 && kind <= SECTION_KIND_MAX;
    if (!isKnown && header.versionMinor <= MODEL_VERSION_MINOR) throw corrupt(file, where, `unknown section kind ${kind} in a version ${MODEL_VERSION_MAJOR}.${header.versionMinor} file`);
    if (isKnown && (isPerOrderKind(kind) ? order < 1 || order > header.order : order !== 0)) throw corrupt(file, where, `order ${order} is not valid for this section in a model of order ${header.order}`);
    if (table.readUInt32LE(entry + 28) !== 0) throw corrupt(file, where, 'reserved bytes of the table entry are not zero');
    if (offset !== position) throw corrupt(file, where, `starts at byte ${offset}; sections follow each other, each at the next multiple of 8, so it must start at byte ${position}`);
    if (bytes > PACK_SECTION_BYTES_MAX || offset + bytes > footer.tableOffset) throw corrupt(file, where, `${bytes} bytes at byte ${offset} run past the start of the section table at byte ${footer.tableOffset}`);
    const info: SectionInfo = { kind, order, name, offset, bytes, crc32: table.readUInt32LE(entry + 24) };
    if (isKnown) {
      const key = `${kind}:${order}`;
      if (known.has(key)) throw corrupt(file, where, 'appears twice in the section table');
      const expected = expectedLength(header, kind, order);
      if (typeof expected === 'number' ? bytes !== expected : bytes < expected.min || bytes > expected.max || (kind >= SectionKind.ProbabilityCodebook && bytes % 8 !== 0)) {
        throw corrupt(file, where, `is ${bytes} bytes; the header's counts require ${typeof expected === 'number' ? expected : `${expected.min}..${expected.max}`}`);
      }
      known.set(key, info);
    }
    sections.push(info);
    position = alignUp(offset + bytes);
  }
  if (position !== footer.tableOffset) throw corrupt(file, 'section table', `the sections end at byte ${position} but the section table starts at byte ${footer.tableOffset}`);
  const quantised = codeBits(header.encoding) > 0;
  for (const [kind, order] of requiredSections(header)) {
    if (!known.has(`${kind}:${order}`)) throw corrupt(file, 'section table', `the ${sectionName(kind, order)} section is missing`);
  }
  if (!quantised) {
    for (const info of known.values()) {
      if (info.kind === SectionKind.ProbabilityCodebook || info.kind === SectionKind.BackOffCodebook) throw corrupt(file, `section ${sections.indexOf(info)} (${info.name})`, 'a codebook in a file of unquantised values');
    }
  }

  // The WebAssembly lookups' memory, which the sections are read into (lookup-wasm.ts).
  let wasm: SharedWasm | null = null;
  if (engine !== 'js') {
    const layout = wasmLayout(footer.tableOffset, header.order, header.encoding);
    const memory = wasmMemory(layout);
    if (memory instanceof Error) {
      if (engine === 'wasm') throw new QuernError('limit', `${file}: ${memory.message}; open it with engine 'auto' or 'js'`);
    } else wasm = { memory, layout };
  }

  // Sections: each into a buffer of its own (or its place in the WebAssembly memory), read in pieces
  // by the thread pool, several at once and ahead of this thread, which checksums each piece as it
  // arrives (in order) and checks the structure of an order as soon as its sections are verified,
  // while later sections are still being read.
  const data = new Map<string, Buffer>();
  const reads = new SectionReads(handle, file, sections, shared, wasm?.memory.buffer ?? null);
  const structure = checkStructure ? new StructureCheck(file, header, sections, data) : null;
  try {
    for (let index = 0; index < sections.length; index++) {
      const info = sections[index];
      const where = `section ${index} (${info.name}) at byte ${info.offset}`;
      const padded = alignUp(info.bytes);
      let crc = 0;
      let buffer: Buffer | null = null;
      for (let done = 0; done < padded; done += PACK_READ_BYTES_MAX) {
        const piece = await reads.next();
        buffer = piece.buffer;
        const checked = Math.min(piece.bytes, info.bytes - done);
        if (checked > 0) crc = crc32(buffer.subarray(done, done + checked), crc); // (crc32 of an empty array may return 0, not crc)
      }
      buffer ??= shared ? Buffer.from(new SharedArrayBuffer(0)) : Buffer.alloc(0);
      for (let i = info.bytes; i < padded; i++) if (buffer[i] !== 0) throw corrupt(file, where, `padding byte ${info.offset + i} is not zero`);
      if (crc !== info.crc32) throw corrupt(file, where, `checksum mismatch (stored 0x${hex(info.crc32)}, computed 0x${hex(crc)})`);
      const body = buffer.subarray(0, info.bytes);
      if (info.kind >= 1 && info.kind <= SECTION_KIND_MAX) data.set(`${info.kind}:${info.order}`, body);
      structure?.run();
    }
  } finally {
    await reads.stop();
  }
  return new PackedModel(file, fileBytes, header, sections, data, checkStructure, wasm);
}

/** Pieces of a file read ahead (at most READ_AHEAD_PIECES at once): the thread pool reads them in
 *  parallel while this thread checks what has arrived. */
const READ_AHEAD_PIECES = 32;

/**
 * The sections of a file read in pieces of at most PACK_READ_BYTES_MAX bytes, in file order, into a
 * buffer per section (each allocated when its first piece is asked for; padding included). `next`
 * returns the pieces in order; up to READ_AHEAD_PIECES reads are in flight. `stop` stops issuing
 * reads and waits for those in flight, so that the file can be closed.
 */
class SectionReads {
  private readonly pieces: Array<{ section: number; start: number; bytes: number }> = [];
  private readonly buffers: Buffer[] = [];
  private readonly pending: Array<Promise<void>> = [];
  private issued = 0;
  private taken = 0;
  private stopped = false;

  /** `memory`: where the sections go, each at its offset in the file (null: a buffer each). */
  constructor(private readonly handle: fsp.FileHandle, private readonly file: string, private readonly sections: SectionInfo[], private readonly shared: boolean, private readonly memory: ArrayBuffer | null) {
    sections.forEach((info, section) => {
      const padded = alignUp(info.bytes);
      for (let start = 0; start < padded; start += PACK_READ_BYTES_MAX) this.pieces.push({ section, start, bytes: Math.min(PACK_READ_BYTES_MAX, padded - start) });
    });
    this.issue();
  }

  private issue(): void {
    while (!this.stopped && this.issued < this.pieces.length && this.issued - this.taken < READ_AHEAD_PIECES) {
      const { section, start, bytes } = this.pieces[this.issued];
      const info = this.sections[section];
      if (start === 0) this.buffers[section] = this.memory !== null ? Buffer.from(this.memory, info.offset, alignUp(info.bytes)) : this.shared ? Buffer.from(new SharedArrayBuffer(alignUp(info.bytes))) : Buffer.allocUnsafeSlow(alignUp(info.bytes));
      const where = `section ${section} (${info.name}) at byte ${info.offset}`;
      const read = readAt(this.handle, this.file, where, this.buffers[section].subarray(start, start + bytes), info.offset + start);
      read.catch(() => undefined); // awaited by `next` (or dropped after `stop`)
      this.pending[this.issued++] = read;
    }
  }

  /** The next piece: the buffer of its section (read up to the piece's end) and the piece's bytes. */
  async next(): Promise<{ buffer: Buffer; bytes: number }> {
    const index = this.taken;
    const { section, bytes } = this.pieces[index];
    await this.pending[index];
    delete this.pending[index];
    this.taken++;
    this.issue();
    return { buffer: this.buffers[section], bytes };
  }

  async stop(): Promise<void> {
    this.stopped = true;
    await Promise.allSettled(this.pending.slice(this.taken, this.issued));
  }
}

/**
 * The structure checks (docs/model-file.md, "What a reader checks", 7), run order by order as soon
 * as the sections an order's check reads are verified (`run` after each section): its codes, and
 * the children of order n with the word ids of order n + 1.
 */
class StructureCheck {
  private next = 1;
  private readonly where: (kind: number, order?: number) => string;

  constructor(private readonly file: string, private readonly header: Header, sections: SectionInfo[], private readonly data: Map<string, Buffer>) {
    this.where = (kind, order = 0) => sectionWhereIn(sections, kind, order);
  }

  run(): void {
    const { header, data, file } = this;
    const quantised = codeBits(header.encoding) > 0;
    const has = (kind: number, order: number): boolean => data.has(`${kind}:${order}`);
    const get = (kind: number, order: number): Buffer => data.get(`${kind}:${order}`) as Buffer;
    while (this.next <= header.order) {
      const n = this.next;
      const highest = n === header.order;
      const needs: Array<[number, number]> = [[SectionKind.Probabilities, n]];
      if (quantised) needs.push([SectionKind.ProbabilityCodebook, n]);
      if (!highest) {
        needs.push([SectionKind.BackOffs, n], [SectionKind.Children, n], [SectionKind.Words, n + 1]);
        if (quantised) needs.push([SectionKind.BackOffCodebook, n]);
      }
      if (!needs.every(([kind, order]) => has(kind, order))) return;
      const level = parseLevel(file, header, n, get, this.where);
      checkCodes(file, this.where(SectionKind.Probabilities, n), level.prob, level.probCodebook);
      if (level.backOff !== null) checkCodes(file, this.where(SectionKind.BackOffs, n), level.backOff, level.backOffCodebook);
      if (!highest) {
        const words = parseWords(file, header, n + 1, get, this.where);
        checkOrder(file, this.where, n, level, words, header.rows[n], header.wordIdBits, header.size);
      }
      this.next++;
    }
  }
}

/** `section i (name)` of the first section of this kind and order. */
function sectionWhereIn(sections: SectionInfo[], kind: number, order: number): string {
  const index = sections.findIndex((info) => info.kind === kind && info.order === order);
  return `section ${index} (${sectionName(kind, order)})`;
}

/** The packed word ids of order n ≥ 2, with the bits after the last one checked to be zero. */
function parseWords(file: string, header: Header, n: number, get: (kind: number, order: number) => Buffer, where: (kind: number, order?: number) => string): Uint32Array {
  const words = view(Uint32Array, get(SectionKind.Words, n), 4);
  if (!packedPaddingIsZero(words, header.rows[n - 1], header.wordIdBits)) throw corrupt(file, where(SectionKind.Words, n), 'the bits after the last word id are not zero');
  return words;
}

/** The arrays of order n (words included for n ≥ 2), with the children section's own checks. */
function parseLevel(file: string, header: Header, n: number, get: (kind: number, order: number) => Buffer, where: (kind: number, order?: number) => string): Level {
  const highest = n === header.order;
  const rows = header.rows[n - 1];
  const quantised = codeBits(header.encoding) > 0;
  const words = n >= 2 ? parseWords(file, header, n, get, where) : null;
  let childBases: Uint32Array | null = null;
  let childOffsets: Uint32Array | null = null;
  let childBits = 0;
  if (!highest) {
    const children = get(SectionKind.Children, n);
    const at = where(SectionKind.Children, n);
    childBits = children.readUInt32LE(0);
    if (childBits > 32 || children.readUInt32LE(4) !== 0) throw corrupt(file, at, `offset width ${childBits} bits (at most 32) and reserved bytes ${children.readUInt32LE(4)} (must be 0)`);
    const start = childOffsetsStart(rows);
    const expected = start + packedBytes(rows + 1, childBits);
    if (children.length !== expected) throw corrupt(file, at, `is ${children.length} bytes; ${rows + 1} offsets of ${childBits} bits require ${expected}`);
    for (let i = 8 + 4 * childBlocks(rows); i < start; i++) if (children[i] !== 0) throw corrupt(file, at, `byte ${i} between the bases and the offsets is not zero`);
    childBases = view(Uint32Array, children, 4, 8, 8 + 4 * childBlocks(rows));
    childOffsets = view(Uint32Array, children, 4, start);
    if (!packedPaddingIsZero(childOffsets, rows + 1, childBits)) throw corrupt(file, at, 'the bits after the last offset are not zero');
  }
  return {
    rows,
    words,
    prob: valueView(header.encoding, get(SectionKind.Probabilities, n)),
    probCodebook: quantised ? view(Float64Array, get(SectionKind.ProbabilityCodebook, n), 8) : null,
    backOff: highest ? null : valueView(header.encoding, get(SectionKind.BackOffs, n)),
    backOffCodebook: quantised && !highest ? view(Float64Array, get(SectionKind.BackOffCodebook, n), 8) : null,
    childBases,
    childOffsets,
    childBits,
  };
}

/** The children of order n < N against the word ids of order n + 1 (`checkChildren`), as errors. */
function checkOrder(file: string, where: (kind: number, order?: number) => string, n: number, level: Level, nextWords: Uint32Array, nextRows: number, wordBits: number, size: number): void {
  const child = checkChildren(level.childBases as Uint32Array, level.childOffsets as Uint32Array, level.childBits, level.rows, nextWords, wordBits, nextRows, size);
  if (child.row >= 0) throw corrupt(file, where(SectionKind.Children, n), child.problem);
  if (child.child >= 0) {
    const word = unpack(nextWords, child.child, wordBits, maskFor(wordBits));
    throw corrupt(file, where(SectionKind.Words, n + 1), `row ${child.child}: word id ${word} ${word > size ? `above V = ${size}` : 'does not ascend within its context (or is <s>)'}`);
  }
}

function view<T>(make: new (buffer: ArrayBufferLike, byteOffset: number, length: number) => T, buffer: Buffer, elementBytes: number, start = 0, end = buffer.length): T {
  return new make(buffer.buffer, buffer.byteOffset + start, (end - start) / elementBytes);
}

function valueView(encoding: ValueEncoding, buffer: Buffer): ValueArray {
  switch (encoding) {
    case ValueEncoding.Float32: return view(Float32Array, buffer, 4);
    case ValueEncoding.Float64: return view(Float64Array, buffer, 8);
    case ValueEncoding.Quantised8: return view(Uint8Array, buffer, 1);
    case ValueEncoding.Quantised16: return view(Uint16Array, buffer, 2);
  }
}

/**
 * First row in [low, high) of the packed word ids `words` (`bits` wide, 1..31, `mask` =
 * maskFor(bits)) equal to `word`, −1 when none (the range ascends). Word ids rank words by frequency
 * and text asks for frequent words most, so the word is usually near the start of its context's
 * children: the first SCAN_ROWS rows are scanned in order, decoded incrementally (no multiplication
 * per row); then galloping (probes at 1, 3, 7, … rows further, then a binary search within the last
 * step), so a row at distance d costs about 2·log2(d) probes instead of log2 of the whole range.
 */
function searchWord(words: Uint32Array, bits: number, mask: number, low: number, high: number, word: number): number {
  const scanned = scanWord(words, bits, mask, low, high, word);
  if (scanned !== PENDING) return scanned;
  low += SCAN_ROWS;
  let bound = low;
  let step = 1;
  while (bound < high) {
    const found = unpack(words, bound, bits, mask);
    if (found === word) return bound;
    if (found > word) {
      high = bound;
      break;
    }
    low = bound + 1;
    bound += step;
    step += step;
  }
  while (low < high) {
    const middle = low + ((high - low) >>> 1);
    const found = unpack(words, middle, bits, mask);
    if (found < word) low = middle + 1;
    else if (found > word) high = middle;
    else return middle;
  }
  return -1;
}

/** searchWord for word ids of exactly 16 bits, which a Uint16Array reads as they are. */
function searchWord16(words: Uint16Array, low: number, high: number, word: number): number {
  const scanned = scanWord16(words, low, high, word);
  if (scanned !== PENDING) return scanned;
  low += SCAN_ROWS;
  let bound = low;
  let step = 1;
  while (bound < high) {
    const found = words[bound];
    if (found === word) return bound;
    if (found > word) {
      high = bound;
      break;
    }
    low = bound + 1;
    bound += step;
    step += step;
  }
  while (low < high) {
    const middle = low + ((high - low) >>> 1);
    const found = words[middle];
    if (found < word) low = middle + 1;
    else if (found > word) high = middle;
    else return middle;
  }
  return -1;
}

/** `scanWord`'s answer when the word may lie past the rows it scanned. */
const PENDING = -2;

/** The first SCAN_ROWS rows of [low, high) of the packed word ids searched in order (as in
 *  `searchWord`): the row holding `word`, −1 when it is not in the range, or PENDING when the range
 *  goes on past the scanned rows and the word is above every one of them. */
function scanWord(words: Uint32Array, bits: number, mask: number, low: number, high: number, word: number): number {
  const scanEnd = Math.min(high, low + SCAN_ROWS);
  const rest = (low & 31) * bits;
  let at = (low >>> 5) * bits + (rest >>> 5);
  let shift = rest & 31;
  for (let row = low; row < scanEnd; row++) {
    const found = ((words[at] >>> shift) | ((words[at + 1] << 1) << (31 - shift))) & mask;
    if (found >= word) return found === word ? row : -1;
    shift += bits;
    if (shift >= 32) {
      shift -= 32;
      at++;
    }
  }
  return scanEnd === high ? -1 : PENDING;
}

/** scanWord for word ids of exactly 16 bits. */
function scanWord16(words: Uint16Array, low: number, high: number, word: number): number {
  const scanEnd = Math.min(high, low + SCAN_ROWS);
  for (let row = low; row < scanEnd; row++) {
    const found = words[row];
    if (found >= word) return found === word ? row : -1;
  }
  return scanEnd === high ? -1 : PENDING;
}

/** Word id `index` of packed ids of `bits` (1..31) bits: `unpack` without the final `>>> 0`
 *  (ids are below 2^31), so that the id stays a small integer for the arithmetic of the search. */
function unpackId(words: Uint32Array, index: number, bits: number, mask: number): number {
  const rest = (index & 31) * bits;
  const at = (index >>> 5) * bits + (rest >>> 5);
  const shift = rest & 31;
  return ((words[at] >>> shift) | ((words[at + 1] << 1) << (31 - shift))) & mask;
}

/** What a lookup reads of one order n (fixed shape: the hot path loads each array once). */
class HotLevel {
  constructor(
    /** The packed word ids of order n (empty at order 1). */
    readonly words: Uint32Array,
    /** The same bytes as 16-bit ids when W = 16 (else empty). */
    readonly words16: Uint16Array,
    /** Children of order n < N: the start of every 64th row, and each row's packed offset from it. */
    readonly bases: Uint32Array,
    readonly offsets: Uint32Array,
    readonly childBits: number,
    readonly childMask: number,
    readonly prob: ValueArray,
    readonly probBook: Float64Array | null,
    readonly backOff: ValueArray,
    readonly backOffBook: Float64Array | null,
    /** The rows of order n + 1 (0 at the highest order): every children range is clamped to
     *  [0, childLimit], so a lookup never reads past the next order's arrays, whatever the file. */
    readonly childLimit: number,
  ) {}
}

/**
 * A codebook as the lookups read it: extended to all 2^bits codes with copies of its last value, so
 * that a code the file's structure check would refuse (≥ the codebook's length) still reads a value
 * of the codebook (a wrong number at worst, never undefined). At most 2^16 f64 = 512 KiB per codebook.
 */
function lookupCodebook(codebook: Float64Array | null, codeBits: number): Float64Array | null {
  if (codebook === null || codebook.length >= 2 ** codeBits) return codebook;
  const extended = new Float64Array(2 ** codeBits).fill(codebook[codebook.length - 1]);
  extended.set(codebook);
  return extended;
}

/** A stored value: the float, or the codebook entry of the code. */
function valueOf(values: ValueArray, codebook: Float64Array | null, row: number): number {
  return codebook === null ? values[row] : codebook[values[row]];
}

/**
 * The first child of row `row` (0..rows) of an order < N, clamped to the next order's rows: without
 * the structure check (`checkStructure`), a crafted file's children may point anywhere, and the
 * clamp keeps every search, value and children read of a lookup inside its arrays (one compare; a
 * valid file's starts are never clamped).
 */
function childrenStart(level: HotLevel, row: number): number {
  const bits = level.childBits;
  const offsets = level.offsets;
  const rest = (row & 31) * bits;
  const at = (row >>> 5) * bits + (rest >>> 5);
  const shift = rest & 31;
  // (>>> 0: a 32-bit offset of a crafted file is not negative either.)
  return Math.min(level.childLimit, level.bases[row >>> CHILD_BLOCK_SHIFT] + ((((offsets[at] >>> shift) | ((offsets[at + 1] << 1) << (31 - shift))) & level.childMask) >>> 0));
}

/** The end of the children of row `row` (the first child of row + 1). */
function childrenEnd(level: HotLevel, row: number): number {
  return childrenStart(level, row + 1);
}

/** Rows a search scans in order before it gallops: the children of a context are often few, and
 *  the frequent words, which text asks for most, come first. */
const SCAN_ROWS = 8;

/** The children of a word (order 2) are sampled every SAMPLE_STEP rows when there are at least
 *  SAMPLED_CHILDREN_MIN of them: the samples of all such words take 4 bytes per SAMPLE_STEP
 *  bigrams (1/18 of their packed ids at 18 bits), and `stepBatch`'s search among thousands of
 *  children then reads one block of 64 packed ids (2 or 3 cache lines) of the model instead of a
 *  dozen lines across the range: +13% lookups/s on the 1 GB benchmark model (load 8, A/B in one
 *  process). Not in `step`: there the binary search over the samples (2.4 MB, not all in cache) is
 *  one more chain of dependent reads, and it cost 12% (1 GB model) to 20% (a 10 MB one). */
const SAMPLE_SHIFT = 6;
const SAMPLE_STEP = 1 << SAMPLE_SHIFT;
const SAMPLED_CHILDREN_MIN = 256;

/**
 * The samples of the long children ranges of order 1 (see SAMPLE_STEP): for each row r of order 1
 * with ≥ SAMPLED_CHILDREN_MIN children, at[r] = where its samples start, and samples[at[r] + j] =
 * the word id of child first(r) + j·SAMPLE_STEP. Built when a model is opened: one pass over the
 * V + 1 children entries of order 1 and a strided read of the sampled ids (on the 1 GB benchmark
 * model, 200,004 rows and 37.8 M bigrams: ~0.6 M samples).
 */
function sampleLongChildren(first: HotLevel, second: HotLevel, rows: number, bits: number, mask: number): [Int32Array, Int32Array] {
  const at = new Int32Array(rows).fill(-1);
  let total = 0;
  for (let row = 0; row < rows; row++) {
    const count = childrenEnd(first, row) - childrenStart(first, row);
    if (count >= SAMPLED_CHILDREN_MIN) {
      at[row] = total;
      total += ((count - 1) >>> SAMPLE_SHIFT) + 1;
    }
  }
  const samples = new Int32Array(total);
  for (let row = 0; row < rows; row++) {
    if (at[row] < 0) continue;
    const start = childrenStart(first, row);
    const end = childrenEnd(first, row);
    for (let child = start, j = at[row]; child < end; child += SAMPLE_STEP, j++) samples[j] = unpackId(second.words, child, bits, mask);
  }
  return [at, samples];
}

/** The last j in [0, count) with samples[first + j] ≤ word, or 0 when none is (the samples of one
 *  context ascend; in a crafted file they may not, and the answer is then some j in range). */
function lastSampleAtMost(samples: Int32Array, first: number, count: number, word: number): number {
  let low = 0;
  let high = count; // samples[first + high] (past the end) counts as above the word
  while (high - low > 1) {
    const middle = (low + high) >>> 1;
    if (samples[first + middle] <= word) low = middle;
    else high = middle;
  }
  return low;
}

/** Bits after the `count` values of a packed array (its padding) must be zero. */
function packedPaddingIsZero(words: Uint32Array, count: number, bits: number): boolean {
  const used = count * bits;
  const firstWord = Math.floor(used / 32);
  const shift = used % 32;
  if (shift > 0 && firstWord < words.length && words[firstWord] >>> shift !== 0) return false;
  for (let word = firstWord + (shift > 0 ? 1 : 0); word < words.length; word++) if (words[word] !== 0) return false;
  return true;
}

const utf8 = new TextDecoder('utf-8');
const utf8Strict = new TextDecoder('utf-8', { fatal: true });
const encoder = new TextEncoder();

/**
 * A model read from a model file: its description, its vocabulary, and lookups by word ids.
 * Create it with `openModel`. Everything it answers comes from the verified sections.
 */
export class PackedModel {
  /** The file it was read from. */
  readonly filePath: string;
  /** Size of the file in bytes. */
  readonly fileBytes: number;
  /** Format version of the file. */
  readonly version: { major: number; minor: number };
  /** Highest order N. */
  readonly order: number;
  /** V: vocabulary words, `</s>` and `<unk>` included, `<s>` not. Ids run 0..V, 0 being `<s>`. */
  readonly vocabularySize: number;
  readonly bosId = BOS_ID;
  readonly eosId: number;
  readonly unkId: number;
  /** False for scores that are not probabilities (stupid backoff). */
  readonly normalised: boolean;
  /** The method and its parameters, as estimated. */
  readonly parameters: MethodParameters;
  /** Minimum raw count per order (index order − 1). */
  readonly cutoffs: number[];
  readonly vocabularyCap: VocabCap | null;
  /** How the training text was normalised into tokens; null when the file does not say (a model
   *  packed from an ARPA file Quern did not write, or by Quern before 2026-12). */
  readonly normalize: NormalizeOptions | null;
  /** log10 weight of backing off from a context the model has never seen (0 except stupid backoff). */
  readonly log10UnseenContextWeight: number;
  /** The corpus fingerprint given when the model was packed (may be empty). */
  readonly fingerprint: string;
  /** Rows per order 1..N (order 1: V + 1, `<s>` included). */
  readonly ngrams: number[];
  readonly encoding: ValueEncoding;
  /** 'float32', 'float64', '8-bit quantised' or '16-bit quantised'. */
  readonly encodingName: string;
  /** The section table. */
  readonly sections: SectionInfo[];

  private readonly levels: Level[];
  /** What the lookups read, by order (index 0 unused): one fixed-shape object per order. */
  private readonly hot: HotLevel[];
  private readonly wordBits: number;
  private readonly wordMask: number;
  /** Word ids of exactly 16 bits, read as a Uint16Array (HotLevel.words16). */
  private readonly words16: boolean;
  private readonly vocabularyWords: Buffer;
  private readonly vocabularyOffsets: Uint32Array;
  private readonly vocabularyHash: Uint32Array;
  private scratch = new Uint8Array(256);
  private readonly scratchState: DecoderState;
  /** The WebAssembly lookups (null: the JavaScript ones answer). */
  private readonly wasm: LookupWasm | null;
  private readonly wasmMemory: SharedWasm | null;
  private readonly sectionWhere: (kind: number, order?: number) => string;
  private checked = false;
  /** `stepBatch` calls so far (each state records the last that took it). */
  private batchCount = 0;
  /** `stepBatch`'s queues of searches past SCAN_ROWS, one per order k (`touchStride` entries each,
   *  `pendingCounts[k]` used): state index, word, and the rows left to search, [base, base +
   *  length), of order k + 1; and its
   *  gathered addresses, by order: `touchStride` entries per order (the largest batch so far). */
  private pendingLane = new Int32Array(0);
  private pendingWord = new Int32Array(0);
  private pendingBase = new Int32Array(0);
  private pendingLength = new Int32Array(0);
  private readonly pendingCounts = new Int32Array(ORDER_MAX + 1);
  private touchWordAt = new Int32Array(0);
  private touchRowAt = new Int32Array(0);
  private touchBaseAt = new Int32Array(0);
  private readonly touchFilled = new Int32Array(ORDER_MAX + 1);
  private readonly touchOffsetsFilled = new Int32Array(ORDER_MAX + 1);
  /** For each word id (a row of order 1) with at least SAMPLED_CHILDREN_MIN children: where its
   *  samples start in `samples`, else −1. `samples` holds the id of every SAMPLE_STEP-th child of
   *  those words (`sampleLongChildren`). */
  private readonly sampleAt: Int32Array;
  private readonly samples: Int32Array;
  private touchStride = 0;
  /** The sum of the values `stepBatch` touched, kept so that the loads stay. */
  private touched = 0;
  /** What `shareable` hands on: the header and the sections as read. */
  private readonly header: Header;
  private readonly data: Map<string, Buffer>;

  /** True once the structure of every order was checked (`openModel`'s `checkStructure`, or
   *  `toLanguageModel`): then every children range and word id is known to be as the format says. */
  get structureChecked(): boolean {
    return this.checked;
  }

  /** @internal Use `openModel`. `wasm`: the memory that `data` lies in, for the WebAssembly lookups;
   *  `attached`: another thread set that memory up (`modelFromShared`). */
  constructor(file: string, fileBytes: number, header: Header, sections: SectionInfo[], data: Map<string, Buffer>, structureChecked: boolean, wasm: SharedWasm | null = null, attached = false) {
    const get = (kind: number, order = 0): Buffer => data.get(`${kind}:${order}`) as Buffer;
    this.header = header;
    this.data = data;
    this.filePath = file;
    this.fileBytes = fileBytes;
    this.version = { major: MODEL_VERSION_MAJOR, minor: header.versionMinor };
    this.order = header.order;
    this.vocabularySize = header.size;
    this.eosId = header.eosId;
    this.unkId = header.unkId;
    this.normalised = header.normalised;
    this.log10UnseenContextWeight = header.log10UnseenContextWeight;
    this.ngrams = header.rows;
    this.encoding = header.encoding;
    this.encodingName = ENCODING_NAMES[header.encoding];
    this.sections = sections;
    const sectionWhere = (kind: number, order = 0): string => sectionWhereIn(sections, kind, order);

    const description = parseDescription(file, sectionWhere(SectionKind.Description), get(SectionKind.Description), header.order);
    this.parameters = description.parameters;
    this.cutoffs = description.cutoffs;
    this.vocabularyCap = description.vocabularyCap;
    this.normalize = description.normalize;
    try {
      this.fingerprint = utf8Strict.decode(get(SectionKind.Fingerprint));
    } catch {
      throw corrupt(file, sectionWhere(SectionKind.Fingerprint), 'not valid UTF-8');
    }

    this.vocabularyWords = get(SectionKind.VocabularyWords);
    this.vocabularyOffsets = view(Uint32Array, get(SectionKind.VocabularyOffsets), 4);
    this.vocabularyHash = view(Uint32Array, get(SectionKind.VocabularyHash), 4);
    this.checkVocabulary(file, sectionWhere);

    this.wordBits = header.wordIdBits;
    this.wordMask = maskFor(header.wordIdBits);
    this.levels = [];
    for (let n = 1; n <= header.order; n++) this.levels.push(parseLevel(file, header, n, get, sectionWhere));
    // Placeholders of the same array types as the real ones, so that the hot path sees one kind.
    const empty32 = new Uint32Array(0);
    const emptyValues = valueView(header.encoding, Buffer.alloc(0));
    this.words16 = this.wordBits === 16;
    const bits = codeBits(header.encoding);
    const hotLevel = (level: Level, index: number): HotLevel => {
      const words = level.words ?? empty32;
      return new HotLevel(
        words, new Uint16Array(words.buffer, words.byteOffset, this.words16 ? words.length * 2 : 0), level.childBases ?? empty32, level.childOffsets ?? empty32, level.childBits,
        maskFor(level.childBits), level.prob, lookupCodebook(level.probCodebook, bits), level.backOff ?? emptyValues, lookupCodebook(level.backOffCodebook, bits),
        index < header.order ? header.rows[index] : 0,
      );
    };
    this.hot = [
      hotLevel({ rows: 0, words: null, prob: emptyValues, probCodebook: null, backOff: null, backOffCodebook: null, childBases: null, childOffsets: null, childBits: 0 }, header.order),
      ...this.levels.map((level, index) => hotLevel(level, index + 1)),
    ];
    this.sectionWhere = sectionWhere;
    // openModel checked the structure while reading (StructureCheck) when asked to.
    this.checked = structureChecked;
    [this.sampleAt, this.samples] = this.order > 1 ? sampleLongChildren(this.hot[1], this.hot[2], this.vocabularySize + 1, this.wordBits, this.wordMask) : [new Int32Array(0), new Int32Array(0)];
    this.wasmMemory = wasm;
    const lookups = wasm === null ? null : new LookupWasm(wasm.memory, wasm.layout, { order: this.order, wordBits: this.wordBits, encoding: this.encoding, log10UnseenContextWeight: this.log10UnseenContextWeight }, this.hot, attached);
    // (Not usable: more threads than chunks of state blocks took one; this one runs JavaScript.)
    this.wasm = lookups !== null && lookups.usable ? lookups : null;
    this.scratchState = this.newState();
  }

  /** Which lookups `step` runs: 'wasm' or 'js' (OpenOptions.engine). */
  get engine(): 'wasm' | 'js' {
    return this.wasm === null ? 'js' : 'wasm';
  }

  /** The model for worker threads (`modelFromShared`); it must have been opened with `{ shared: true }`
   *  or have the WebAssembly lookups (whose memory is shared). */
  shareable(): SharedModel {
    const data: SharedModel['data'] = [];
    for (const [key, buffer] of this.data) {
      if (!(buffer.buffer instanceof SharedArrayBuffer)) throw new Error(`${this.filePath}: opened without { shared: true }, so it cannot be shared with worker threads`);
      data.push({ key, buffer: buffer.buffer, byteOffset: buffer.byteOffset, byteLength: buffer.byteLength });
    }
    const shared: SharedModel = { file: this.filePath, fileBytes: this.fileBytes, header: this.header, sections: this.sections, data, structureChecked: this.checked };
    if (this.wasmMemory !== null) shared.wasm = this.wasmMemory;
    return shared;
  }

  /** Vocabulary checks that every lookup relies on (cheap: one pass over V + 1 words). */
  private checkVocabulary(file: string, sectionWhere: (kind: number, order?: number) => string): void {
    const size = this.vocabularySize;
    const offsets = this.vocabularyOffsets;
    const words = this.vocabularyWords;
    if (offsets[0] !== 0 || offsets[size + 1] !== words.length) {
      throw corrupt(file, sectionWhere(SectionKind.VocabularyOffsets), `offsets must run from 0 to the ${words.length} bytes of the words`);
    }
    for (let id = 0; id <= size; id++) {
      if (offsets[id + 1] < offsets[id]) throw corrupt(file, sectionWhere(SectionKind.VocabularyOffsets), `the offset of id ${id + 1} is below that of id ${id}`);
    }
    try {
      utf8Strict.decode(words);
    } catch {
      throw corrupt(file, sectionWhere(SectionKind.VocabularyWords), 'not valid UTF-8');
    }
    if (this.word(BOS_ID) !== BOS || this.word(this.eosId) !== EOS || this.word(this.unkId) !== UNK) {
      throw corrupt(file, sectionWhere(SectionKind.VocabularyWords), `ids 0, ${this.eosId} and ${this.unkId} must be <s>, </s> and <unk>`);
    }
    // The hash table: every id exactly once, each reachable from its hash without an empty slot.
    const slots = this.vocabularyHash;
    const mask = slots.length - 1;
    const where = sectionWhere(SectionKind.VocabularyHash);
    let filled = 0;
    for (let slot = 0; slot < slots.length; slot++) {
      const value = slots[slot];
      if (value > size + 1) throw corrupt(file, where, `slot ${slot} holds ${value}, above V + 1 = ${size + 1}`);
      if (value !== 0) filled++;
    }
    if (filled !== size + 1) throw corrupt(file, where, `${filled} slots are filled; a vocabulary of ${size} needs ${size + 1}`);
    for (let id = 0; id <= size; id++) {
      let slot = fnv1a32(words, offsets[id], offsets[id + 1]) & mask;
      let probes = 0;
      while (slots[slot] !== id + 1) {
        if (slots[slot] === 0 || ++probes > mask) throw corrupt(file, where, `id ${id} cannot be found from its hash`);
        slot = (slot + 1) & mask;
      }
    }
  }

  /** Structure checks the queries rely on: one pass over the children, word and code arrays. */
  private checkStructure(file: string, sectionWhere: (kind: number, order?: number) => string): void {
    for (let n = 1; n <= this.order; n++) {
      const level = this.levels[n - 1];
      checkCodes(file, sectionWhere(SectionKind.Probabilities, n), level.prob, level.probCodebook);
      if (level.backOff !== null) checkCodes(file, sectionWhere(SectionKind.BackOffs, n), level.backOff, level.backOffCodebook);
      if (level.childOffsets !== null) checkOrder(file, sectionWhere, n, level, this.levels[n].words as Uint32Array, this.levels[n].rows, this.wordBits, this.vocabularySize);
    }
    this.checked = true;
  }

  /** The word of an id (0..V). */
  word(id: number): string {
    if (!Number.isInteger(id) || id < 0 || id > this.vocabularySize) throw new RangeError(`id must be an integer in [0, ${this.vocabularySize}] (got ${id})`);
    return utf8.decode(this.vocabularyWords.subarray(this.vocabularyOffsets[id], this.vocabularyOffsets[id + 1]));
  }

  /** Whether the word of id `id` (0..V) starts with the UTF-8 bytes `prefix`: as `word(id).startsWith`
   *  for the prefix's text, without decoding the word. */
  wordStartsWith(id: number, prefix: Uint8Array): boolean {
    if (!Number.isInteger(id) || id < 0 || id > this.vocabularySize) throw new RangeError(`id must be an integer in [0, ${this.vocabularySize}] (got ${id})`);
    const start = this.vocabularyOffsets[id];
    if (this.vocabularyOffsets[id + 1] - start < prefix.length) return false;
    const words = this.vocabularyWords;
    for (let i = 0; i < prefix.length; i++) if (words[start + i] !== prefix[i]) return false;
    return true;
  }

  /** The id a word of text is scored as: its id, or −1 when it is out of the vocabulary — then
   *  scored as `<unk>` — which `<s>`, `</s>` and `<unk>` written in the text are too. */
  textWordId(word: string): number {
    const id = word === EOS || word === UNK ? -1 : this.wordId(word);
    return id <= BOS_ID ? -1 : id;
  }

  /** The id of a word (`<s>` is 0), or −1 when the word is not in the vocabulary. */
  wordId(word: string): number {
    if (this.scratch.length < word.length * 3) this.scratch = new Uint8Array(word.length * 3);
    const { written } = encoder.encodeInto(word, this.scratch);
    return this.idOfBytes(this.scratch, 0, written, fnv1a32(this.scratch, 0, written));
  }

  /**
   * `textWordId` of the word whose UTF-8 bytes are bytes[start, end) and whose FNV-1a hash is `hash`
   * (the hash of the vocabulary section, as the corpus readers compute it while they scan): so that
   * their byte tokenizer looks text up in the model's own vocabulary (WordLookup; src/score/).
   */
  find(bytes: Uint8Array, start: number, end: number, hash: number): number {
    const id = this.idOfBytes(bytes, start, end, hash);
    return id === BOS_ID || id === this.eosId || id === this.unkId ? -1 : id;
  }

  /** The id of the word bytes[start, end) of FNV-1a hash `hash`, or −1. */
  private idOfBytes(bytes: Uint8Array, start: number, end: number, hash: number): number {
    const slots = this.vocabularyHash;
    const mask = slots.length - 1;
    const offsets = this.vocabularyOffsets;
    const words = this.vocabularyWords;
    const length = end - start;
    let slot = hash & mask;
    for (let probes = 0; probes <= mask; probes++) {
      const value = slots[slot];
      if (value === 0) return -1;
      const id = value - 1;
      const at = offsets[id];
      if (offsets[id + 1] - at === length) {
        let equal = true;
        for (let i = 0; i < length && equal; i++) equal = words[at + i] === bytes[start + i];
        if (equal) return id;
      }
      slot = (slot + 1) & mask;
    }
    return -1;
  }

  /** log10 probability of row `row` of order n. */
  private prob(n: number, row: number): number {
    const level = this.hot[n];
    return valueOf(level.prob, level.probBook, row);
  }

  /** log10 back-off weight of row `row` of order n < N. */
  private backOff(n: number, row: number): number {
    const level = this.hot[n];
    return valueOf(level.backOff, level.backOffBook, row);
  }

  /** The first child (a row of order n+1) of row `row` (0..rows) of order n < N, clamped (childrenStart). */
  private childStart(n: number, row: number): number {
    return childrenStart(this.hot[n], row);
  }

  /** The row of order n+1 that extends row `row` of order n (< N) with `word`, or −1. */
  private childOf(n: number, row: number, word: number): number {
    const level = this.hot[n];
    const start = childrenStart(level, row);
    const end = childrenEnd(level, row);
    if (start >= end) return -1;
    const next = this.hot[n + 1];
    return this.words16 ? searchWord16(next.words16, start, end, word) : searchWord(next.words, this.wordBits, this.wordMask, start, end, word);
  }

  /** The row in [start, end) of order n whose word id is `word`, or −1. */
  private findRow(n: number, start: number, end: number, word: number): number {
    const level = this.hot[n];
    return this.words16 ? searchWord16(level.words16, start, end, word) : searchWord(level.words, this.wordBits, this.wordMask, start, end, word);
  }

  private checkWord(word: number): void {
    if (!(Number.isInteger(word) && word >= 1 && word <= this.vocabularySize)) {
      throw new RangeError(`word must be a vocabulary id in [1, ${this.vocabularySize}] (got ${word}); <s> is never predicted`);
    }
  }

  /**
   * log10 p(word | history) by the back-off rule (src/estimate/model.ts): the longest n-gram h w of
   * the model answers, times the back-off weights of the longer contexts that were seen (a context
   * never seen backs off with `log10UnseenContextWeight`, 0 for a normalised model). `history` is
   * the ids before `word` in the wrapped sentence (`<s>` first, OOV words as `<unk>`); only its
   * last N − 1 are read. `word` is an id in [1, V].
   */
  logProb(history: ArrayLike<number>, word: number): PackedLookup {
    this.checkWord(word);
    const length = history.length;
    const contextLength = Math.min(this.order - 1, length);
    for (let i = length - contextLength; i < length; i++) {
      const id = history[i];
      if (!(Number.isInteger(id) && id >= 0 && id <= this.vocabularySize)) throw new RangeError(`history ids must be integers in [0, ${this.vocabularySize}] (got ${id})`);
    }
    let backOff = 0;
    for (let k = contextLength; k >= 1; k--) {
      // The row of the last k history ids at order k: descend from the first of them.
      let row = history[length - k];
      for (let i = length - k + 1, n = 1; i < length && row >= 0; i++, n++) row = this.childOf(n, row, history[i]);
      if (row >= 0) {
        const start = this.childStart(k, row);
        const end = this.childStart(k, row + 1);
        if (start < end) {
          const found = this.findRow(k + 1, start, end, word);
          if (found >= 0) return { log10Prob: backOff + this.prob(k + 1, found), order: k + 1 };
          backOff += this.backOff(k, row);
          continue;
        }
      }
      backOff += this.log10UnseenContextWeight;
    }
    return { log10Prob: backOff + this.prob(1, word), order: 1 };
  }

  /** A state at the start of a sentence, for `step`. */
  newState(): DecoderState {
    // A block in the WebAssembly memory, where `step` works on it; a block of its own without the
    // WebAssembly lookups or when all LOOKUP_WASM_STATES_MAX are in use (copied in and out per step).
    const wasm = this.wasm;
    const at = wasm === null ? -1 : wasm.take();
    const state = at < 0 ? new DecoderState() : new DecoderState(wasm, at);
    this.resetState(state);
    return state;
  }

  /** Puts `state` at the start of a sentence: right after `<s>` (N = 1: an empty history). */
  resetState(state: DecoderState): void {
    state.order = 0;
    if (this.order === 1) {
      state.length = 0;
      return;
    }
    state.length = 1;
    state.ids[0] = BOS_ID;
    state.rows[1] = BOS_ID;
    state.starts[1] = childrenStart(this.hot[1], BOS_ID);
    state.ends[1] = childrenEnd(this.hot[1], BOS_ID);
  }

  /**
   * Scores `word` (an id in [1, V]; an OOV word is `<unk>`'s id) after the history of `state`, and
   * moves `state` past it, in place (no allocation): the log10 probability is returned and the
   * order that answered is left in `state.order`. Equal to `logProb(state.history, word)`. Cost:
   * one search (within one context's children) per order tried from the longest context down, plus
   * one per shorter order to find the new state's rows.
   */
  step(state: DecoderState, word: number): number {
    // The WebAssembly lookups on a state whose block is in their memory (lookup-wasm.ts); kept this
    // short so that the engine inlines it into the caller's loop. Everything else: `stepOther`.
    const wasm = this.wasm;
    if (wasm !== null && state.owner === wasm && word >= 1 && word <= this.vocabularySize && Math.floor(word) === word) {
      const length = state.length;
      const log10Prob = wasm.step(state.at, length, word);
      state.order = state.block[STATE_ORDER_AT];
      state.length = length < this.order - 1 ? length + 1 : length;
      return log10Prob;
    }
    return this.stepOther(state, word);
  }

  /** `step` in JavaScript, or in WebAssembly on a state whose block is not in the memory (copied in
   *  and out), or a word out of range (refused). */
  private stepOther(state: DecoderState, word: number): number {
    if (!(word >= 1 && word <= this.vocabularySize && Math.floor(word) === word)) this.checkWord(word);
    const length = state.length;
    const keep = length < this.order - 1 ? length + 1 : length;
    const wasm = this.wasm;
    if (wasm !== null) {
      const log10Prob = this.stepCopied(wasm, state, length, word);
      state.length = keep;
      return log10Prob;
    }
    const rows = state.rows;
    const hot = this.hot;
    const words16 = this.words16;
    const wordBits = this.wordBits;
    const wordMask = this.wordMask;
    // Rows are updated in place from the top down: rows[k + 1] (new) is written only after rows[k + 1]
    // (old) has been read, and the new rows[j + 1] of a shorter suffix needs only the old rows[j].
    let backOff = 0;
    let log10Prob = 0;
    let order = 1;
    let k = length;
    const starts = state.starts;
    const ends = state.ends;
    for (; k >= 1; k--) {
      const row = rows[k];
      if (row >= 0) {
        const level = hot[k];
        const start = starts[k];
        const end = ends[k];
        if (start < end) {
          // Read before the search, so that the memory access runs while the search does.
          const rowBackOff = valueOf(level.backOff, level.backOffBook, row);
          const next = hot[k + 1];
          const found = words16 ? searchWord16(next.words16, start, end, word) : searchWord(next.words, wordBits, wordMask, start, end, word);
          if (found >= 0) {
            log10Prob = backOff + valueOf(next.prob, next.probBook, found);
            order = k + 1;
            if (k < keep) {
              rows[k + 1] = found;
              // The next word searches these children first: decoded now, while this one finishes.
              starts[k + 1] = childrenStart(next, found);
              ends[k + 1] = childrenEnd(next, found);
            }
            break;
          }
          backOff += rowBackOff;
        } else backOff += this.log10UnseenContextWeight;
      } else backOff += this.log10UnseenContextWeight;
      if (k < keep) rows[k + 1] = -1;
    }
    if (order === 1) log10Prob = backOff + valueOf(hot[1].prob, hot[1].probBook, word);
    // The rows of the shorter suffixes of the new history (below the n-gram that answered, they all
    // exist when the model keeps the suffixes of its n-grams, as the estimators do; searched anyway).
    for (let j = Math.min(k - 1, keep - 1); j >= 1; j--) {
      const row = rows[j];
      let found = -1;
      if (row >= 0) {
        const start = starts[j];
        const end = ends[j];
        if (start < end) {
          const next = hot[j + 1];
          found = words16 ? searchWord16(next.words16, start, end, word) : searchWord(next.words, wordBits, wordMask, start, end, word);
          if (found >= 0) {
            starts[j + 1] = childrenStart(next, found);
            ends[j + 1] = childrenEnd(next, found);
          }
        }
      }
      rows[j + 1] = found;
    }
    if (keep > 0) {
      rows[1] = word;
      starts[1] = childrenStart(hot[1], word);
      ends[1] = childrenEnd(hot[1], word);
      const ids = state.ids;
      if (keep === length) for (let i = 1; i < length; i++) ids[i - 1] = ids[i];
      ids[keep - 1] = word;
    }
    state.length = keep;
    state.order = order;
    return log10Prob;
  }

  /** `step` in WebAssembly for a state whose block is not in its memory: the block copied into the
   *  scratch block and back. Sets the ids, rows and order, not the length. */
  private stepCopied(wasm: LookupWasm, state: DecoderState, length: number, word: number): number {
    wasm.scratchBlock.set(state.block);
    const log10Prob = wasm.step(wasm.scratch, length, word);
    state.block.set(wasm.scratchBlock);
    state.order = state.block[STATE_ORDER_AT];
    return log10Prob;
  }

  /**
   * Advances many independent states at once: `states[i]` past `words[i]` (an id in [1, V]; an OOV
   * word is `<unk>`'s id) for i < `count`, as `step(states[i], words[i])` would, one after another:
   * `log10Probs[i]` gets the log10 probability and `states[i].order` the order that answered. The
   * states must be distinct (a decoder's beam, or sentences scored together, one state each).
   *
   * Why: on a model far larger than the CPU's caches, a lookup waits on one memory access after
   * another (a children range, a search, a value), and one state's accesses depend on each other.
   * Those of different states do not, so this runs each lookup in four phases, each over every
   * state before the next: touch what the states already locate (the first children of each of
   * their contexts, their back-off weights), search the word among those children at every order,
   * touch what the searches found (the value that answers, the new rows' children ranges), and
   * finish. The memory accesses of one phase overlap across the states instead of following one
   * another; the numbers are those of `step`, bit for bit.
   */
  stepBatch(states: readonly DecoderState[], words: ArrayLike<number>, log10Probs: Float64Array, count = states.length): void {
    if (!(Number.isInteger(count) && count >= 0 && count <= states.length && count <= words.length && count <= log10Probs.length)) {
      throw new RangeError(`count must be an integer in [0, ${Math.min(states.length, words.length, log10Probs.length)}] (states, words and results available; got ${count})`);
    }
    const batch = ++this.batchCount;
    for (let i = 0; i < count; i++) {
      const word = words[i];
      if (!(word >= 1 && word <= this.vocabularySize && Math.floor(word) === word)) this.checkWord(word);
      const state = states[i];
      if (state.batch === batch) throw new RangeError(`states[${i}] appears twice in one stepBatch call; each state must be advanced once per call`);
      state.batch = batch;
    }
    if (this.touchStride < count) {
      const capacity = count * (ORDER_MAX + 1);
      this.pendingLane = new Int32Array(capacity);
      this.pendingWord = new Int32Array(capacity);
      this.pendingBase = new Int32Array(capacity);
      this.pendingLength = new Int32Array(capacity);
      this.touchStride = count;
      this.touchWordAt = new Int32Array(count * (ORDER_MAX + 1));
      this.touchRowAt = new Int32Array(count * (ORDER_MAX + 1));
      this.touchBaseAt = new Int32Array(count * (ORDER_MAX + 1));
    }
    let sink = this.touchContexts(states, count);
    for (let i = 0; i < count; i++) this.scanAll(states[i], i, words[i]);
    this.searchPending(states);
    sink += this.touchFound(states, count);
    for (let i = 0; i < count; i++) log10Probs[i] = this.finishStep(states[i], words[i]);
    // The touched values are kept so that the compiler keeps the loads that read them.
    this.touched = sink;
  }

  /**
   * Phase 1 of `stepBatch`: reads, for their memory access only, what the states already locate —
   * the word ids that start the children of each of their contexts, and those contexts' back-off
   * weights. The addresses are gathered first, by order, and each order's then read in one tight
   * loop: the fewer instructions between two loads, the more of them the CPU keeps in flight.
   */
  private touchContexts(states: readonly DecoderState[], count: number): number {
    const hot = this.hot;
    const bits = this.wordBits;
    const words16 = this.words16;
    const stride = this.touchStride;
    const wordAt = this.touchWordAt;
    const rowAt = this.touchRowAt;
    const filled = this.touchFilled;
    filled.fill(0);
    for (let i = 0; i < count; i++) {
      const state = states[i];
      const rows = state.rows;
      const starts = state.starts;
      const ends = state.ends;
      for (let k = state.length; k >= 1; k--) {
        const row = rows[k];
        const start = starts[k];
        if (row >= 0 && start < ends[k]) {
          const at = k * stride + filled[k]++;
          // The u32 that holds the first child's id (16-bit ids: two to a u32).
          wordAt[at] = words16 ? start >>> 1 : (start >>> 5) * bits + (((start & 31) * bits) >>> 5);
          rowAt[at] = row;
        }
      }
    }
    let sink = 0;
    for (let k = 1; k < this.order; k++) {
      const words = hot[k + 1].words;
      const backOff = hot[k].backOff;
      const end = k * stride + filled[k];
      for (let at = k * stride; at < end; at++) sink += words[wordAt[at]] + backOff[rowAt[at]];
    }
    return sink;
  }

  /** Phase 2 of `stepBatch`, first part: `word` looked for among the first SCAN_ROWS children of
   *  every context of `state` (touched in phase 1): found[k] = the row, −1 when it is not there, or
   *  PENDING with the rest of the range queued for the interleaved search (`searchPending`). */
  private scanAll(state: DecoderState, lane: number, word: number): void {
    const hot = this.hot;
    const rows = state.rows;
    const starts = state.starts;
    const ends = state.ends;
    const found = state.found;
    const words16 = this.words16;
    for (let k = state.length; k >= 1; k--) {
      let row = -1;
      if (rows[k] >= 0) {
        const start = starts[k];
        const end = ends[k];
        if (start < end) {
          const next = hot[k + 1];
          row = words16 ? scanWord16(next.words16, start, end, word) : scanWord(next.words, this.wordBits, this.wordMask, start, end, word);
          if (row === PENDING) {
            // Ids ascend from 1 within a context, so `word` is among its first `word` children.
            let low = start + SCAN_ROWS;
            let high = Math.min(end, start + word);
            const sampled = k === 1 ? this.sampleAt[rows[1]] : -1;
            if (sampled >= 0) {
              // The samples (in the CPU's cache) narrow the search to one SAMPLE_STEP-row block.
              const block = lastSampleAtMost(this.samples, sampled, ((end - start - 1) >>> SAMPLE_SHIFT) + 1, word);
              const blockStart = start + (block << SAMPLE_SHIFT);
              if (this.samples[sampled + block] === word) {
                found[k] = blockStart;
                continue;
              }
              low = Math.max(low, blockStart);
              high = Math.min(high, blockStart + SAMPLE_STEP);
            }
            if (low >= high) row = -1;
            else {
              const at = k * this.touchStride + this.pendingCounts[k]++;
              this.pendingLane[at] = lane;
              this.pendingWord[at] = word;
              this.pendingBase[at] = low;
              this.pendingLength[at] = high - low;
            }
          }
        }
      }
      found[k] = row;
    }
  }

  /**
   * Phase 2 of `stepBatch`, second part: the queued searches (ranges longer than SCAN_ROWS, the
   * long children lists of the low orders) run together, order by order, one probe of each per
   * round: a binary search for the last row whose id is ≤ the word, whose step depends on the
   * probed id by arithmetic, not by a branch, so that the probes of one round (of different states)
   * are all in flight at once.
   */
  private searchPending(states: readonly DecoderState[]): void {
    const hot = this.hot;
    const stride = this.touchStride;
    const lanes = this.pendingLane;
    const sought = this.pendingWord;
    const bases = this.pendingBase;
    const lengths = this.pendingLength;
    const counts = this.pendingCounts;
    const bits = this.wordBits;
    const mask = this.wordMask;
    const words16 = this.words16;
    for (let k = 1; k < this.order; k++) {
      const level = hot[k + 1];
      const packed = level.words;
      const ids16 = level.words16;
      const first = k * stride;
      let pending = counts[k];
      while (pending > 0) {
        let kept = 0;
        for (let i = first; i < first + pending; i++) {
          const word = sought[i];
          let base = bases[i];
          let length = lengths[i];
          if (length > 1) {
            const half = length >>> 1;
            const probe = base + half;
            const id = words16 ? ids16[probe] : unpackId(packed, probe, bits, mask);
            base += half & ((id - word - 1) >> 31); // id ≤ word: the word, if there, is in the upper half
            length -= half;
          }
          if (length > 1) {
            const at = first + kept++;
            lanes[at] = lanes[i];
            sought[at] = word;
            bases[at] = base;
            lengths[at] = length;
            continue;
          }
          // One row left: the last whose id is ≤ the word (or the first row, when none is): the word
          // is there or nowhere, the ids ascending.
          const id = words16 ? ids16[base] : unpackId(packed, base, bits, mask);
          states[lanes[i]].found[k] = id === word ? base : -1;
        }
        pending = kept;
      }
      counts[k] = 0;
    }
  }

  /**
   * Phase 3 of `stepBatch`: each state's answering order (`answer`: the highest k with found[k] ≥ 0,
   * 0 when none), then, gathered by order as in phase 1, the reads (for their memory access only)
   * of the value that answers and of the children entries (offset and base) of the rows the new
   * state keeps.
   */
  private touchFound(states: readonly DecoderState[], count: number): number {
    const hot = this.hot;
    const stride = this.touchStride;
    const probAt = this.touchRowAt;
    const offsetAt = this.touchWordAt;
    const baseAt = this.touchBaseAt;
    const probs = this.touchFilled;
    const offsets = this.touchOffsetsFilled;
    probs.fill(0);
    offsets.fill(0);
    const order = this.order;
    for (let i = 0; i < count; i++) {
      const state = states[i];
      const found = state.found;
      const length = state.length;
      const keep = length < order - 1 ? length + 1 : length;
      let answer = length;
      while (answer > 0 && found[answer] < 0) answer--;
      state.answer = answer;
      if (answer > 0) probAt[(answer + 1) * stride + probs[answer + 1]++] = found[answer];
      for (let k = Math.min(answer, keep - 1); k >= 1; k--) {
        const row = found[k];
        if (row >= 0) {
          const bits = hot[k + 1].childBits;
          const at = (k + 1) * stride + offsets[k + 1]++;
          offsetAt[at] = (row >>> 5) * bits + (((row & 31) * bits) >>> 5);
          baseAt[at] = row >>> CHILD_BLOCK_SHIFT;
        }
      }
    }
    let sink = 0;
    for (let n = 2; n <= order; n++) {
      const level = hot[n];
      const prob = level.prob;
      let end = n * stride + probs[n];
      for (let at = n * stride; at < end; at++) sink += prob[probAt[at]];
      const childOffsets = level.offsets;
      const childBases = level.bases;
      end = n * stride + offsets[n];
      for (let at = n * stride; at < end; at++) sink += childOffsets[offsetAt[at]] + childBases[baseAt[at]];
    }
    return sink;
  }

  /** Phase 4 of `stepBatch`: the log10 probability from the searches' results, and the new state
   *  (the same arithmetic, in the same order, as `step`). */
  private finishStep(state: DecoderState, word: number): number {
    const hot = this.hot;
    const rows = state.rows;
    const starts = state.starts;
    const ends = state.ends;
    const found = state.found;
    const length = state.length;
    const keep = length < this.order - 1 ? length + 1 : length;
    const answer = state.answer;
    let backOff = 0;
    for (let k = length; k > answer; k--) {
      const row = rows[k];
      backOff += row >= 0 && starts[k] < ends[k] ? valueOf(hot[k].backOff, hot[k].backOffBook, row) : this.log10UnseenContextWeight;
    }
    let log10Prob: number;
    if (answer > 0) {
      const next = hot[answer + 1];
      log10Prob = backOff + valueOf(next.prob, next.probBook, found[answer]);
    } else log10Prob = backOff + valueOf(hot[1].prob, hot[1].probBook, word);
    // The new rows, from the top down: rows[k + 1] (new) is written after rows[k + 1] (old) was read.
    for (let k = keep - 1; k >= 1; k--) {
      const row = found[k]; // −1 above the answer (searched, not found)
      rows[k + 1] = row;
      if (row >= 0) {
        const next = hot[k + 1];
        starts[k + 1] = childrenStart(next, row);
        ends[k + 1] = childrenEnd(next, row);
      }
    }
    if (keep > 0) {
      rows[1] = word;
      starts[1] = childrenStart(hot[1], word);
      ends[1] = childrenEnd(hot[1], word);
      const ids = state.ids;
      if (keep === length) for (let i = 1; i < length; i++) ids[i - 1] = ids[i];
      ids[keep - 1] = word;
    }
    state.length = keep;
    state.order = answer + 1;
    return log10Prob;
  }

  /** The state at the start of a sentence: right after `<s>` (N = 1: an empty history). */
  beginState(): ModelState {
    return this.order === 1 ? new ModelState(0, []) : new ModelState(1, [BOS_ID, BOS_ID]);
  }

  /**
   * Scores `word` (an id in [1, V]; an OOV word is `<unk>`'s id) after the history of `state`, and
   * returns the state after it, which keeps the last min(N − 1, i + 1) ids. Equal to
   * `logProb(state.history, word)` and to `step`; `state` itself is not changed (a new state is
   * allocated: a decoder's loop that needs no old states is faster with `step`).
   */
  advance(state: ModelState, word: number): AdvanceResult {
    const scratch = this.scratchState;
    const length = state.length;
    const data = state.data;
    scratch.length = length;
    for (let i = 0; i < length; i++) {
      scratch.ids[i] = data[i];
      const row = data[length + i];
      scratch.rows[i + 1] = row;
      if (row >= 0) {
        scratch.starts[i + 1] = childrenStart(this.hot[i + 1], row);
        scratch.ends[i + 1] = childrenEnd(this.hot[i + 1], row);
      }
    }
    const log10Prob = this.step(scratch, word);
    const keep = scratch.length;
    const next = new Array<number>(2 * keep);
    for (let i = 0; i < keep; i++) {
      next[i] = scratch.ids[i];
      next[keep + i] = scratch.rows[i + 1];
    }
    return { log10Prob, order: scratch.order, state: new ModelState(keep, next) };
  }

  /**
   * The continuations of the history of `state`: for each of its context rows, longest context
   * first, the rows [start, end) of order `order` that extend it (its children) and `base`, the
   * back-off weights every child there gets added to its own log10 p (`childLog10Prob`), as `step`
   * adds them (in the same order). A word may come again under a shorter context: only its first
   * score is its own. `backOff` is the weights every other word gets: log10 p(w | h) = that +
   * log10 p1(w), answered at order 1. For src/score/next-words.ts.
   */
  continuations(state: ModelState): { ranges: ContinuationRange[]; backOff: number } {
    const length = state.length;
    const ranges: ContinuationRange[] = [];
    let backOff = 0;
    for (let k = length; k >= 1; k--) {
      const row = state.data[length + k - 1];
      const level = this.hot[k];
      const start = row >= 0 ? childrenStart(level, row) : 0;
      const end = row >= 0 ? childrenEnd(level, row) : 0;
      if (start >= end) {
        backOff += this.log10UnseenContextWeight;
        continue;
      }
      ranges.push({ order: k + 1, start, end, base: backOff });
      backOff += valueOf(level.backOff, level.backOffBook, row);
    }
    return { ranges, backOff };
  }

  /** The word id of row `row` of order n (2..N): a child in a ContinuationRange. */
  childWord(n: number, row: number): number {
    return this.words16 ? this.hot[n].words16[row] : unpackId(this.hot[n].words, row, this.wordBits, this.wordMask);
  }

  /** log10 p of row `row` of order n (2..N), as stored (before any back-off weight). */
  childLog10Prob(n: number, row: number): number {
    const level = this.hot[n];
    return valueOf(level.prob, level.probBook, row);
  }

  /** The row in [start, end) of order n (2..N) whose word is `word` (a ContinuationRange's
   *  children ascend by word id), or −1. */
  findChild(n: number, start: number, end: number, word: number): number {
    return this.findRow(n, start, end, word);
  }

  /**
   * Scores a tokenised sentence wrapped as `<s> w1 … wm </s>` (DESIGN.md): every token and `</s>` is
   * predicted from the tokens before it. A token outside the vocabulary, and a literal `<s>`, `</s>`
   * or `<unk>`, is an OOV: scored as `<unk>`, it stays in the history as `<unk>`. An empty sentence
   * scores `</s>` alone.
   */
  scoreSentence(words: readonly string[]): SentenceScore {
    const tokens: TokenScore[] = [];
    const state = this.newState();
    let log10Prob = 0;
    let log10ProbWithUnk = 0;
    let oovCount = 0;
    for (let i = 0; i <= words.length; i++) {
      const word = i < words.length ? words[i] : EOS;
      let id: number;
      let oov = false;
      if (i === words.length) id = this.eosId;
      else {
        id = this.textWordId(word);
        if (id < 0) {
          id = this.unkId;
          oov = true;
        }
      }
      const value = this.step(state, id);
      tokens.push({ word, id, oov, log10Prob: value, order: state.order });
      log10ProbWithUnk += value;
      if (oov) oovCount++;
      else log10Prob += value;
    }
    return { tokens, log10Prob, log10ProbWithUnk, oov: oovCount };
  }

  /**
   * The model as a stream of rows (src/estimate/model-source.ts), order by order in row order, for
   * `quern export` and packing again: each pass over order n walks the children ranges of orders
   * 1..n depth first, keeping the ids of the path, so a row's ids come with it and no order is ever
   * held in memory (`toLanguageModel` holds them all, in arrays of 4n + 20 bytes per n-gram of
   * order n). Runs the structure check first when `openModel` did not.
   */
  toModelSource(): ModelSource {
    return { header: this.headerOf(this.checkedWords()), rowCounts: [...this.ngrams], rows: (order: number) => this.walkRows(order) };
  }

  /**
   * Every word by id, after the structure check when `openModel` did not make it: walking every
   * context's children (`toModelSource`, `toLanguageModel`) needs the ranges checked.
   */
  private checkedWords(): string[] {
    if (!this.structureChecked) this.checkStructure(this.filePath, this.sectionWhere);
    const words: string[] = [];
    for (let id = 0; id <= this.vocabularySize; id++) words.push(this.word(id));
    return words;
  }

  /** Rows of order n in row order, with their ids (`toModelSource`), in batches of WALK_BATCH_ROWS. */
  private async *walkRows(n: number): AsyncGenerator<ModelRowBatch> {
    if (!(Number.isInteger(n) && n >= 1 && n <= this.order)) throw new RangeError(`order must be an integer in [1, ${this.order}] (got ${n})`);
    const hot = this.hot;
    const rowsTotal = this.ngrams[n - 1];
    const highest = n === this.order;
    let ids = new Uint32Array(WALK_BATCH_ROWS * n);
    let log10Prob = new Float64Array(WALK_BATCH_ROWS);
    let log10BackOff = new Float64Array(WALK_BATCH_ROWS);
    let filled = 0;
    // The path: at depth d (1..n), rows [cursor[d], end[d]) of order d are left to visit, and ids[d - 1]
    // of `path` is the id of the row being visited.
    const cursor = new Int32Array(n + 1);
    const end = new Int32Array(n + 1);
    const path = new Uint32Array(n);
    let depth = 1;
    cursor[1] = 0;
    end[1] = this.ngrams[0];
    let emitted = 0;
    while (depth > 0) {
      if (cursor[depth] >= end[depth]) {
        depth--;
        if (depth > 0) cursor[depth]++;
        continue;
      }
      const row = cursor[depth];
      path[depth - 1] = depth === 1 ? row : unpack(hot[depth].words, row, this.wordBits, this.wordMask);
      if (depth < n) {
        const level = hot[depth];
        cursor[depth + 1] = childrenStart(level, row);
        end[depth + 1] = childrenEnd(level, row);
        depth++;
        continue;
      }
      // A row of order n: row `emitted` of the order, since depth first visits them in row order.
      if (row !== emitted) assert(false, `order ${n}: rows are visited in order`);
      ids.set(path, filled * n);
      const level = hot[n];
      log10Prob[filled] = valueOf(level.prob, level.probBook, row);
      log10BackOff[filled] = !highest && childrenEnd(level, row) > childrenStart(level, row) ? valueOf(level.backOff, level.backOffBook, row) : 0;
      filled++;
      emitted++;
      cursor[depth]++;
      if (filled === WALK_BATCH_ROWS) {
        yield { rows: filled, ids, log10Prob, log10BackOff };
        ids = new Uint32Array(WALK_BATCH_ROWS * n);
        log10Prob = new Float64Array(WALK_BATCH_ROWS);
        log10BackOff = new Float64Array(WALK_BATCH_ROWS);
        filled = 0;
      }
    }
    if (filled > 0) yield { rows: filled, ids: ids.subarray(0, filled * n), log10Prob: log10Prob.subarray(0, filled), log10BackOff: log10BackOff.subarray(0, filled) };
    assert(emitted === rowsTotal, `order ${n}: ${emitted} rows visited of ${rowsTotal}`);
  }

  /** Everything of the model but its rows, with `words` as its vocabulary. */
  private headerOf(words: string[]): Omit<LanguageModel, 'orders'> {
    return {
      order: this.order,
      vocabulary: { words, eosId: this.eosId, unkId: this.unkId },
      normalised: this.normalised,
      parameters: this.parameters,
      cutoffs: [...this.cutoffs],
      vocabularyCap: this.vocabularyCap,
      ...(this.normalize === null ? {} : { normalize: { ...this.normalize } }),
      log10UnseenContextWeight: this.log10UnseenContextWeight,
    };
  }

  /**
   * The model as an in-memory `LanguageModel` (float64 values; quantised values are their codebook
   * values; the back-off weights of rows that are no context are 0). For export and comparison.
   */
  toLanguageModel(): LanguageModel {
    const size = this.vocabularySize;
    const words = this.checkedWords();
    const orders: ModelOrder[] = [];
    for (let n = 1; n <= this.order; n++) {
      const level = this.levels[n - 1];
      const rows = level.rows;
      const ids = new Uint32Array(rows * n);
      const contextRow = new Uint32Array(n === 1 ? 0 : rows);
      if (n === 1) for (let id = 0; id <= size; id++) ids[id] = id;
      else {
        const lower = orders[n - 2];
        const lastWords = level.words as Uint32Array;
        for (let parent = 0; parent < this.levels[n - 2].rows; parent++) {
          const end = this.childStart(n - 1, parent + 1);
          for (let row = this.childStart(n - 1, parent); row < end; row++) {
            for (let i = 0; i < n - 1; i++) ids[row * n + i] = lower.ids[parent * (n - 1) + i];
            ids[row * n + n - 1] = unpack(lastWords, row, this.wordBits, this.wordMask);
            contextRow[row] = parent;
          }
        }
      }
      const log10Prob = new Float64Array(rows);
      const log10BackOff = new Float64Array(rows);
      for (let row = 0; row < rows; row++) {
        log10Prob[row] = this.prob(n, row);
        if (n < this.order && this.childStart(n, row + 1) > this.childStart(n, row)) log10BackOff[row] = this.backOff(n, row);
      }
      orders.push({ order: n, ids, log10Prob, log10BackOff, contextRow });
    }
    return { ...this.headerOf(words), orders };
  }
}

/** Rows per batch of `PackedModel.toModelSource`. */
const WALK_BATCH_ROWS = 65_536;

/**
 * The children of an order n < N and the word ids of order n + 1, decoded in sequence in one pass:
 * the children start at 0, ascend, end at the `nextRows` rows of order n + 1, and each block's
 * first offset is 0 (`row`/`problem` name the first failure); within each context the word ids
 * ascend and lie in 1..`size` (`child` names the first row of order n + 1 that fails). A context's
 * words are read only once its range is known to lie inside order n + 1; when a word fails, the
 * ranges are checked to the end first, so that damaged children are reported as such.
 */
function checkChildren(bases: Uint32Array, offsets: Uint32Array, bits: number, rows: number, words: Uint32Array, wordBits: number, nextRows: number, size: number): { row: number; problem: string; child: number } {
  const mask = maskFor(bits);
  const wordMask = maskFor(wordBits);
  let at = 0;
  let shift = 0;
  let wordAt = 0;
  let wordShift = 0;
  let previousStart = 0;
  let failedChild = -1;
  for (let row = 0; row <= rows; row++) {
    const offset = (((offsets[at] >>> shift) | ((offsets[at + 1] << 1) << (31 - shift))) & mask) >>> 0;
    shift += bits;
    at += shift >>> 5;
    shift &= 31;
    const start = bases[row >>> CHILD_BLOCK_SHIFT] + offset;
    if (start < previousStart || start > nextRows || ((row & (CHILD_BLOCK_ROWS - 1)) === 0 && (offset !== 0 || (row === 0 && start !== 0))) || (row === rows && start !== nextRows)) {
      return { row, problem: childrenProblem(row, offset, start, previousStart, rows, nextRows), child: -1 };
    }
    if (failedChild < 0) {
      // The children of row − 1: [previousStart, start), read in sequence; ascending, in 1..size.
      let previous = 0;
      for (let child = previousStart; child < start; child++) {
        const word = ((words[wordAt] >>> wordShift) | ((words[wordAt + 1] << 1) << (31 - wordShift))) & wordMask;
        wordShift += wordBits;
        wordAt += wordShift >>> 5;
        wordShift &= 31;
        if (word <= previous || word > size) {
          failedChild = child;
          break;
        }
        previous = word;
      }
    }
    previousStart = start;
  }
  return { row: -1, problem: '', child: failedChild };
}

/** What is wrong with the children entry of `row` (checkChildren found something). */
function childrenProblem(row: number, offset: number, start: number, previousStart: number, rows: number, nextRows: number): string {
  if ((row & (CHILD_BLOCK_ROWS - 1)) === 0 && offset !== 0) return `the offset of row ${row}, the first of its block, is ${offset}, not 0`;
  if (row === 0 && start !== 0) return `the children of row 0 start at ${start}, not 0`;
  if (start < previousStart) return `the children of row ${row} start before those of row ${row - 1}`;
  if (start > nextRows) return `the children of row ${row} start at ${start}, past the ${nextRows} rows of the next order`;
  return `children must run from row 0 to the ${nextRows} rows of the next order (they end at ${start})`;
}

/** Codes of a quantised section must index their codebook. */
function checkCodes(file: string, where: string, codes: ValueArray, codebook: Float64Array | null): void {
  // Floats have no codebook; a codebook of 2^8 (2^16) values takes every 8-bit (16-bit) code.
  if (codebook === null || codebook.length >= 2 ** (8 * codes.BYTES_PER_ELEMENT)) return;
  let highest = 0;
  for (let i = 0; i < codes.length; i++) if (codes[i] > highest) highest = codes[i];
  if (codes.length > 0 && highest >= codebook.length) throw corrupt(file, where, `code ${highest} is outside its codebook of ${codebook.length} values`);
}

/** The description section: JSON of { parameters, cutoffs, vocabularyCap, normalize? }. */
function parseDescription(file: string, where: string, bytes: Buffer, order: number): { parameters: MethodParameters; cutoffs: number[]; vocabularyCap: VocabCap | null; normalize: NormalizeOptions | null } {
  let json: unknown;
  try {
    json = JSON.parse(utf8Strict.decode(bytes));
  } catch {
    throw corrupt(file, where, 'not valid UTF-8 JSON');
  }
  const description = json as { parameters?: { method?: unknown }; cutoffs?: unknown; vocabularyCap?: unknown; normalize?: unknown };
  if (typeof description !== 'object' || description === null || typeof description.parameters !== 'object' || description.parameters === null || typeof description.parameters.method !== 'string') {
    throw corrupt(file, where, 'the description names no method');
  }
  const cutoffs = description.cutoffs;
  if (!Array.isArray(cutoffs) || cutoffs.length !== order || !cutoffs.every((cutoff) => Number.isSafeInteger(cutoff) && cutoff >= 1)) {
    throw corrupt(file, where, `the cutoffs must be ${order} integers ≥ 1`);
  }
  const cap = description.vocabularyCap;
  if (!(cap === null || (typeof cap === 'object' && !Array.isArray(cap)))) throw corrupt(file, where, 'the vocabulary cap must be null or an object');
  const normalize = description.normalize;
  if (normalize !== undefined && !isNormalizeOptions(normalize)) throw corrupt(file, where, 'the normalisation must be { lowercase, unicode, split } as quern count takes them');
  return { parameters: description.parameters as MethodParameters, cutoffs: cutoffs as number[], vocabularyCap: cap as VocabCap | null, normalize: normalize ?? null };
}
