/**
 * The model-file writer: a `LanguageModel` in back-off form → one file laid out as
 * docs/model-file.md specifies, written atomically (temporary file, fsync, rename, directory fsync).
 *
 * The in-memory model's order-n rows are already grouped by context (rows sort by their ids, so the
 * n-grams of one context are contiguous and contexts ascend), so the file keeps the rows as they
 * are: row r of order n in the file is row r of `model.orders[n − 1]`. What changes is how a row is
 * reached: instead of all n ids, the file stores each row's last word id, and each row of order
 * n < N records where its children (the rows of order n+1 it is the context of) start.
 *
 * The bytes depend on the model and the options only (no time, path or random salt), so the same
 * model always gives the same file. Each section is built as a buffer of its own; the whole file is
 * never one buffer.
 */
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import { BOS, BOS_ID, EOS, UNK } from '../corpus/vocabulary.ts';
import { vocabularySize } from '../estimate/counts.ts';
import { checkModel, modelRowCount, type LanguageModel } from '../estimate/model.ts';
import { writeFileThrough, type StageFs } from '../job/fsio.ts';
import { ORDER_MAX, PACK_FINGERPRINT_BYTES_MAX, PACK_ROWS_MAX, PACK_SECTION_BYTES_MAX, PACK_DESCRIPTION_BYTES_MAX, PACK_SECTIONS_MAX } from '../limits.ts';
import {
  alignUp, FLAG_NORMALISED, fnv1a32, H, hashSlotsFor, HEADER_BYTES, MODEL_MAGIC, MODEL_VERSION_MAJOR, MODEL_VERSION_MINOR,
  requireLittleEndian, SECTION_ENTRY_BYTES, SectionKind, sectionName, ValueEncoding, wordIdBytesFor,
} from './format.ts';
import { encodeValues, fitCodebook } from './quantise.ts';

/** Options of `packModel`. */
export interface PackOptions {
  /** Quantise log10 probabilities and back-off weights to 8 or 16 bits (a codebook per order and
   *  kind, fitted to the values); absent: store them as floats. */
  quantBits?: 8 | 16;
  /** Width of unquantised values: 32 (default; about 7 significant digits) or 64 bits (the model's
   *  values exactly). Not allowed together with `quantBits`. */
  floatBits?: 32 | 64;
  /** The corpus fingerprint the caller records with the model (e.g. a hash of the job's inputs);
   *  at most PACK_FINGERPRINT_BYTES_MAX bytes of UTF-8; may be empty. */
  fingerprint: string;
}

/** What `packModel` wrote. */
export interface PackSummary {
  filePath: string;
  /** Size of the file. */
  bytes: number;
  /** Rows per order 1..N (order 1: V + 1, `<s>` included). */
  ngrams: number[];
  encoding: ValueEncoding;
  sections: number;
}

/** One section to write. */
interface Section {
  kind: number;
  order: number;
  bytes: Uint8Array;
}

/**
 * Writes `model` to `filePath` as a model file (docs/model-file.md), atomically through `fs`.
 * Throws QuernError 'config' for bad options, 'limit' when a section would exceed
 * PACK_SECTION_BYTES_MAX, 'io' when the file system fails (no file is left behind then).
 */
export async function packModel(model: LanguageModel, options: PackOptions, fs: StageFs, filePath: string): Promise<PackSummary> {
  requireLittleEndian();
  const encoding = encodingOf(options);
  if (typeof options.fingerprint !== 'string') throw new QuernError('config', 'fingerprint must be a string (it may be empty)');
  const fingerprint = Buffer.from(options.fingerprint, 'utf8');
  if (fingerprint.length > PACK_FINGERPRINT_BYTES_MAX) {
    throw new QuernError('config', `fingerprint must be at most ${PACK_FINGERPRINT_BYTES_MAX} bytes of UTF-8 (got ${fingerprint.length})`);
  }
  const sections = buildSections(model, encoding, fingerprint);
  const { header, table } = layOut(model, encoding, sections);

  let fileBytes = 0;
  await writeFileThrough(fs, filePath, async (file) => {
    await file.write(header);
    await file.write(table);
    fileBytes = header.length + table.length;
    for (const section of sections) {
      await file.write(section.bytes);
      fileBytes += section.bytes.length;
      const padding = alignUp(fileBytes) - fileBytes;
      if (padding > 0) await file.write(new Uint8Array(padding));
      fileBytes += padding;
    }
  });
  return { filePath, bytes: fileBytes, ngrams: model.orders.map(modelRowCount), encoding, sections: sections.length };
}

function encodingOf(options: PackOptions): ValueEncoding {
  const { quantBits, floatBits } = options;
  if (quantBits !== undefined && quantBits !== 8 && quantBits !== 16) throw new QuernError('config', `quantBits must be 8 or 16 (got ${quantBits})`);
  if (floatBits !== undefined && floatBits !== 32 && floatBits !== 64) throw new QuernError('config', `floatBits must be 32 or 64 (got ${floatBits})`);
  if (quantBits !== undefined && floatBits !== undefined) throw new QuernError('config', 'give quantBits or floatBits, not both: quantised values are codes, not floats');
  if (quantBits === 8) return ValueEncoding.Quantised8;
  if (quantBits === 16) return ValueEncoding.Quantised16;
  return floatBits === 64 ? ValueEncoding.Float64 : ValueEncoding.Float32;
}

/** The sections in file order (docs/model-file.md, "Section order"). */
function buildSections(model: LanguageModel, encoding: ValueEncoding, fingerprint: Buffer): Section[] {
  checkModel(model);
  const size = vocabularySize(model.vocabulary);
  const { words, eosId, unkId } = model.vocabulary;
  assert(model.order >= 1 && model.order <= ORDER_MAX, `model order in [1, ${ORDER_MAX}]`);
  assert(words[BOS_ID] === BOS && words[eosId] === EOS && words[unkId] === UNK, 'model vocabulary holds the markers at their ids');
  assert(Number.isFinite(model.log10UnseenContextWeight), 'the unseen-context weight is finite');
  const sections: Section[] = [];
  const add = (kind: number, order: number, bytes: Uint8Array): void => {
    if (bytes.length > PACK_SECTION_BYTES_MAX) {
      throw new QuernError('limit', `the ${sectionName(kind, order)} would take ${bytes.length} bytes, over the ${PACK_SECTION_BYTES_MAX}-byte section limit of the model file`);
    }
    sections.push({ kind, order, bytes });
  };

  const description = Buffer.from(JSON.stringify({ parameters: model.parameters, cutoffs: model.cutoffs, vocabularyCap: model.vocabularyCap }), 'utf8');
  if (description.length > PACK_DESCRIPTION_BYTES_MAX) throw new QuernError('limit', `the model description takes ${description.length} bytes, over ${PACK_DESCRIPTION_BYTES_MAX}`);
  add(SectionKind.Description, 0, description);
  add(SectionKind.Fingerprint, 0, fingerprint);

  // Vocabulary: the words' UTF-8 bytes by id, their offsets, and the hash table for word → id.
  const encoded = words.map((word) => Buffer.from(word, 'utf8'));
  let wordBytes = 0;
  for (const bytes of encoded) wordBytes += bytes.length;
  if (wordBytes > PACK_SECTION_BYTES_MAX) throw new QuernError('limit', `the vocabulary takes ${wordBytes} bytes of UTF-8, over the ${PACK_SECTION_BYTES_MAX}-byte section limit`);
  const vocabularyWords = Buffer.allocUnsafeSlow(wordBytes);
  const offsets = new Uint32Array(size + 2);
  let offset = 0;
  encoded.forEach((bytes, id) => {
    offsets[id] = offset;
    vocabularyWords.set(bytes, offset);
    offset += bytes.length;
  });
  offsets[size + 1] = offset;
  const slots = new Uint32Array(hashSlotsFor(size + 1));
  const mask = slots.length - 1;
  for (let id = 0; id <= size; id++) {
    let slot = fnv1a32(vocabularyWords, offsets[id], offsets[id + 1]) & mask;
    while (slots[slot] !== 0) slot = (slot + 1) & mask;
    slots[slot] = id + 1;
  }
  add(SectionKind.VocabularyWords, 0, vocabularyWords);
  add(SectionKind.VocabularyOffsets, 0, bytesOf(offsets));
  add(SectionKind.VocabularyHash, 0, bytesOf(slots));

  const wide = wordIdBytesFor(size) === 4;
  const quantBits = encoding === ValueEncoding.Quantised8 ? 8 : encoding === ValueEncoding.Quantised16 ? 16 : 0;
  for (let n = 1; n <= model.order; n++) {
    const table = model.orders[n - 1];
    const rows = modelRowCount(table);
    if (rows > PACK_ROWS_MAX) throw new QuernError('limit', `order ${n} has ${rows} n-grams, over the model file's ${PACK_ROWS_MAX} per order`);
    if (n >= 2) {
      const ids = wide ? new Uint32Array(rows) : new Uint16Array(rows);
      for (let row = 0; row < rows; row++) {
        const word = table.ids[row * n + n - 1];
        if (!(word >= 1 && word <= size)) assert(false, `order ${n}: a predicted word is a vocabulary id other than <s> (got ${word})`);
        ids[row] = word;
      }
      add(SectionKind.Words, n, bytesOf(ids));
    }
    checkValues(table.log10Prob, n, 'probability');
    if (quantBits === 0) add(SectionKind.Probabilities, n, floatBytes(table.log10Prob, encoding));
    else {
      const codebook = fitCodebook(table.log10Prob, quantBits);
      add(SectionKind.Probabilities, n, bytesOf(encodeValues(table.log10Prob, codebook, quantBits)));
      add(SectionKind.ProbabilityCodebook, n, bytesOf(codebook));
    }
    if (n === model.order) continue;

    // Children of each row: the rows of order n+1 whose context it is, [children[r], children[r+1]).
    const higher = model.orders[n];
    const higherRows = modelRowCount(higher);
    const children = new Uint32Array(rows + 1);
    let child = 0;
    for (let row = 0; row < rows; row++) {
      children[row] = child;
      while (child < higherRows && higher.contextRow[child] === row) child++;
    }
    children[rows] = child;
    assert(child === higherRows, `order ${n + 1}: context rows ascend (rows are grouped by context)`);
    // Back-off weights of the rows that are contexts; the others are never read and are stored as 0.
    const isContext = new Uint8Array(rows);
    const backOffs = new Float64Array(rows);
    for (let row = 0; row < rows; row++) {
      if (children[row + 1] > children[row]) {
        isContext[row] = 1;
        backOffs[row] = table.log10BackOff[row];
      }
    }
    checkValues(backOffs, n, 'back-off weight');
    if (quantBits === 0) add(SectionKind.BackOffs, n, floatBytes(backOffs, encoding));
    else {
      const codebook = fitCodebook(backOffs, quantBits, isContext);
      add(SectionKind.BackOffs, n, bytesOf(encodeValues(backOffs, codebook, quantBits, isContext)));
      add(SectionKind.BackOffCodebook, n, bytesOf(codebook));
    }
    add(SectionKind.Children, n, bytesOf(children));
  }
  assert(sections.length <= PACK_SECTIONS_MAX, 'the sections of a model of order ≤ ORDER_MAX fit the section table');
  return sections;
}

/** Asserts that log10 values are finite or −∞ (a NaN or +∞ in a model is a programmer error). */
function checkValues(values: Float64Array, order: number, what: string): void {
  for (let i = 0; i < values.length; i++) {
    const value = values[i];
    if (!(Number.isFinite(value) || value === -Infinity)) assert(false, `order ${order}: a log10 ${what} is finite or −∞ (got ${value})`);
  }
}

function floatBytes(values: Float64Array, encoding: ValueEncoding): Uint8Array {
  return bytesOf(encoding === ValueEncoding.Float64 ? values : Float32Array.from(values));
}

/** The bytes of a typed array (little-endian on every machine this runs on: requireLittleEndian). */
function bytesOf(array: Uint8Array | Uint16Array | Uint32Array | Float32Array | Float64Array): Uint8Array {
  return new Uint8Array(array.buffer, array.byteOffset, array.byteLength);
}

/** Header and section table (docs/model-file.md, "Header", "Section table"). */
function layOut(model: LanguageModel, encoding: ValueEncoding, sections: Section[]): { header: Buffer; table: Buffer } {
  const table = Buffer.alloc(sections.length * SECTION_ENTRY_BYTES);
  let offset = HEADER_BYTES + table.length;
  sections.forEach((section, index) => {
    const entry = index * SECTION_ENTRY_BYTES;
    table.writeUInt32LE(section.kind, entry);
    table.writeUInt32LE(section.order, entry + 4);
    table.writeBigUInt64LE(BigInt(offset), entry + 8);
    table.writeBigUInt64LE(BigInt(section.bytes.length), entry + 16);
    table.writeUInt32LE(crc32(section.bytes), entry + 24);
    offset = alignUp(offset + section.bytes.length);
  });
  const size = vocabularySize(model.vocabulary);
  const header = Buffer.alloc(HEADER_BYTES);
  MODEL_MAGIC.copy(header, H.magic);
  header.writeUInt16LE(MODEL_VERSION_MAJOR, H.versionMajor);
  header.writeUInt16LE(MODEL_VERSION_MINOR, H.versionMinor);
  header.writeUInt32LE(HEADER_BYTES, H.headerBytes);
  header.writeBigUInt64LE(BigInt(offset), H.fileBytes);
  header.writeUInt32LE(model.normalised ? FLAG_NORMALISED : 0, H.flags);
  header.writeUInt32LE(model.order, H.order);
  header.writeUInt32LE(size, H.vocabularySize);
  header.writeUInt32LE(model.vocabulary.eosId, H.eosId);
  header.writeUInt32LE(model.vocabulary.unkId, H.unkId);
  header.writeUInt8(encoding, H.valueEncoding);
  header.writeUInt8(wordIdBytesFor(size), H.wordIdBytes);
  // +0 turns a −0 into 0, so that equal models give equal bytes.
  header.writeDoubleLE(model.log10UnseenContextWeight + 0, H.log10UnseenContextWeight);
  header.writeUInt32LE(sections.length, H.sectionCount);
  header.writeUInt32LE(crc32(table), H.sectionTableCrc);
  model.orders.forEach((table, index) => header.writeBigUInt64LE(BigInt(modelRowCount(table)), H.ngramCounts + 8 * index));
  header.writeUInt32LE(crc32(header.subarray(0, H.headerCrc)), H.headerCrc);
  return { header, table };
}
