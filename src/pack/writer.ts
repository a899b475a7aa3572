/**
 * The model-file writer: a model in back-off form, read order by order through a `ModelSource`
 * (src/estimate/model-source.ts) → one file laid out as docs/model-file.md specifies, written
 * atomically (temporary file, fsync, rename, directory fsync).
 *
 * The source's order-n rows are already grouped by context (rows sort by their ids, so the n-grams
 * of one context are contiguous and contexts ascend), so the file keeps the rows as they are: row r
 * of order n in the file is row r of the source's order n. What changes is how a row is reached:
 * instead of all n ids, the file stores each row's last word id, and each row of order n < N records
 * where its children (the rows of order n+1 it is the context of) start.
 *
 * Streaming: no order is ever held whole — only per order n < N a bit per row (is it a context?)
 * and a u32 per 64 rows (children bases). One pass over the rows of order n, with those of order
 * n + 1 beside them (child-counts.ts), builds every section of the order into spools (spool.ts:
 * temporary files beside the model's, deleted once written), since the sections follow one another
 * in the file; so each order is read twice (and a model streamed from an estimate's result files is
 * merged twice), not once per section. A codebook is fitted on a pass over its spool before its
 * codes are written (`sampleForFit`). Disk: the spools of one order at a time, about the size of
 * its sections (float64 values until they are coded, and 4 bytes per row for the children).
 *
 * The bytes depend on the model and the options only (no time, path or random salt), so the same
 * model always gives the same file.
 */
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import { BOS, BOS_ID, EOS, UNK } from '../corpus/vocabulary.ts';
import type { NormalizeOptions } from '../corpus/types.ts';
import { vocabularySize } from '../estimate/counts.ts';
import { checkModel, type LanguageModel } from '../estimate/model.ts';
import { modelSource, type ModelHeader, type ModelSource } from '../estimate/model-source.ts';
import { temporaryPathOf, writeFileThrough, type StageFs } from '../job/fsio.ts';
import { ORDER_MAX, PACK_FINGERPRINT_BYTES_MAX, PACK_ROWS_MAX, PACK_SECTION_BYTES_MAX, PACK_DESCRIPTION_BYTES_MAX, QUANT_FIT_VALUES_MAX } from '../limits.ts';
import { BitPacker } from './bits.ts';
import { rowsWithChildren } from './child-counts.ts';
import { ModelFileWriter } from './file-writer.ts';
import { Spool } from './spool.ts';
import { trackTemporary, untrackTemporary } from './temporaries.ts';
import {
  bitsFor, CHILD_BLOCK_ROWS, childBlocks, childOffsetsStart, FLAG_NORMALISED, fnv1a32, H, hashSlotsFor, HEADER_BYTES, MODEL_MAGIC, MODEL_VERSION_MAJOR, MODEL_VERSION_MINOR,
  requireLittleEndian, SectionKind, ValueEncoding,
} from './format.ts';
import { encodeValues, fitCodebook, type Codebook } from './quantise.ts';

/** Options of `packModel` and `packModelSource`. */
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
  /** How the training text was normalised into tokens, recorded so that `quern score` normalises
   *  text the same way; absent: the source header's, if it has one. */
  normalize?: NormalizeOptions;
}

/** What `packModel` or `packModelSource` wrote. */
export interface PackSummary {
  filePath: string;
  /** Size of the file. */
  bytes: number;
  /** Rows per order 1..N (order 1: V + 1, `<s>` included). */
  ngrams: number[];
  encoding: ValueEncoding;
  sections: number;
}

/**
 * Writes `model` to `filePath` as a model file (docs/model-file.md), atomically through `fs`:
 * `packModelSource(modelSource(model), …)` after checking the model's shape.
 * Throws QuernError 'config' for bad options, 'limit' when a section would exceed
 * PACK_SECTION_BYTES_MAX, 'io' when the file system fails (no file is left behind then).
 */
export async function packModel(model: LanguageModel, options: PackOptions, fs: StageFs, filePath: string): Promise<PackSummary> {
  checkOptions(options);
  checkModel(model);
  return packModelSource(modelSource(model), options, fs, filePath);
}

/**
 * Writes the model that `source` streams to `filePath` as a model file (docs/model-file.md),
 * atomically through `fs`, reading each order as often as its sections need (module comment) and
 * never holding an order whole. The same rows and options give the same bytes.
 * Throws QuernError 'config' for bad options, 'limit' when a count or a section exceeds the
 * format's limits, 'io' when the file system fails (no file is left behind then). A source that
 * breaks its contract (rows not ascending, a context missing, a NaN) is an assertion failure.
 */
export async function packModelSource(source: ModelSource, options: PackOptions, fs: StageFs, filePath: string): Promise<PackSummary> {
  requireLittleEndian();
  const { encoding, fingerprint } = checkOptions(options);
  const { header, rowCounts } = source;
  const size = vocabularySize(header.vocabulary);
  const { words, eosId, unkId } = header.vocabulary;
  assert(header.order >= 1 && header.order <= ORDER_MAX, `model order in [1, ${ORDER_MAX}]`);
  assert(rowCounts.length === header.order, 'one row count per order');
  assert(rowCounts[0] === size + 1, 'order 1 holds every id 0..V');
  assert(words[BOS_ID] === BOS && words[eosId] === EOS && words[unkId] === UNK, 'model vocabulary holds the markers at their ids');
  assert(Number.isFinite(header.log10UnseenContextWeight), 'the unseen-context weight is finite');
  rowCounts.forEach((rows, index) => {
    assert(Number.isSafeInteger(rows) && rows >= 0, 'row counts are integers ≥ 0');
    if (rows > PACK_ROWS_MAX) throw new QuernError('limit', `order ${index + 1} has ${rows} n-grams, over the model file's ${PACK_ROWS_MAX} per order`);
  });
  const normalize = options.normalize ?? header.normalize;
  const description = Buffer.from(JSON.stringify({ parameters: header.parameters, cutoffs: header.cutoffs, vocabularyCap: header.vocabularyCap, ...(normalize === undefined ? {} : { normalize }) }), 'utf8');
  if (description.length > PACK_DESCRIPTION_BYTES_MAX) throw new QuernError('limit', `the model description takes ${description.length} bytes, over ${PACK_DESCRIPTION_BYTES_MAX}`);
  const vocabulary = vocabularySections(header);

  let fileBytes = 0;
  let sections = 0;
  // writeFileThrough's temporary name, for a signal handler that deletes it (temporaries.ts).
  const temporary = temporaryPathOf(filePath);
  trackTemporary(temporary);
  try {
    await writeFileThrough(fs, filePath, async (file) => {
      const out = new ModelFileWriter(file);
      await out.header(headerBytes(header, rowCounts, encoding));
      await out.section(SectionKind.Description, 0, description);
      await out.section(SectionKind.Fingerprint, 0, fingerprint);
      await out.section(SectionKind.VocabularyWords, 0, vocabulary.words);
      await out.section(SectionKind.VocabularyOffsets, 0, vocabulary.offsets);
      await out.section(SectionKind.VocabularyHash, 0, vocabulary.hash);
      const makeSpool: SpoolMaker = (n, name) => Spool.create(fs, `${filePath}.${process.pid}.o${n}-${name}.tmp`);
      for (let n = 1; n <= header.order; n++) await writeOrder(out, source, n, encoding, makeSpool);
      fileBytes = await out.finish();
      sections = out.sections.length;
    });
  } finally {
    untrackTemporary(temporary);
  }
  return { filePath, bytes: fileBytes, ngrams: [...rowCounts], encoding, sections };
}

function checkOptions(options: PackOptions): { encoding: ValueEncoding; fingerprint: Buffer } {
  const encoding = encodingOf(options);
  if (typeof options.fingerprint !== 'string') throw new QuernError('config', 'fingerprint must be a string (it may be empty)');
  const fingerprint = Buffer.from(options.fingerprint, 'utf8');
  if (fingerprint.length > PACK_FINGERPRINT_BYTES_MAX) {
    throw new QuernError('config', `fingerprint must be at most ${PACK_FINGERPRINT_BYTES_MAX} bytes of UTF-8 (got ${fingerprint.length})`);
  }
  return { encoding, fingerprint };
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

/** The vocabulary sections: the words' UTF-8 bytes by id, their offsets, and the word → id hash table. */
function vocabularySections(header: ModelHeader): { words: Uint8Array; offsets: Uint8Array; hash: Uint8Array } {
  const size = vocabularySize(header.vocabulary);
  const encoded = header.vocabulary.words.map((word) => Buffer.from(word, 'utf8'));
  let wordBytes = 0;
  for (const bytes of encoded) wordBytes += bytes.length;
  if (wordBytes > PACK_SECTION_BYTES_MAX) throw new QuernError('limit', `the vocabulary takes ${wordBytes} bytes of UTF-8, over the ${PACK_SECTION_BYTES_MAX}-byte section limit`);
  const words = Buffer.allocUnsafeSlow(wordBytes);
  const offsets = new Uint32Array(size + 2);
  let offset = 0;
  encoded.forEach((bytes, id) => {
    offsets[id] = offset;
    words.set(bytes, offset);
    offset += bytes.length;
  });
  offsets[size + 1] = offset;
  const slots = new Uint32Array(hashSlotsFor(size + 1));
  const mask = slots.length - 1;
  for (let id = 0; id <= size; id++) {
    let slot = fnv1a32(words, offsets[id], offsets[id + 1]) & mask;
    while (slots[slot] !== 0) slot = (slot + 1) & mask;
    slots[slot] = id + 1;
  }
  return { words, offsets: bytesOf(offsets), hash: bytesOf(slots) };
}

/** Creates the spool of one order's section (`name`), a temporary file beside the model's. */
type SpoolMaker = (n: number, name: string) => Promise<Spool>;

/**
 * The sections of order n, in file order: word ids (n ≥ 2), probabilities (and codebook), back-off
 * weights (and codebook) and children (n < N). One pass over the rows of order n, with those of
 * order n + 1 beside them for the children (`rowsWithChildren`), checks the rows and spools every
 * section's content (the values as stored, or as float64 when codes are fitted to them later; the
 * children as one u32 start per row, packed once their width is known); then the sections are
 * written from the spools in turn.
 */
async function writeOrder(out: ModelFileWriter, source: ModelSource, n: number, encoding: ValueEncoding, makeSpool: SpoolMaker): Promise<void> {
  const order = source.header.order;
  const rows = source.rowCounts[n - 1];
  const size = vocabularySize(source.header.vocabulary);
  const quantBits = encoding === ValueEncoding.Quantised8 ? 8 : encoding === ValueEncoding.Quantised16 ? 16 : 0;
  const spooledEncoding = quantBits === 0 ? encoding : ValueEncoding.Float64;
  const valueUnit = spooledEncoding === ValueEncoding.Float64 ? 8 : 4;
  const hasChildren = n < order;
  const spools: Spool[] = [];
  const spool = async (name: string): Promise<Spool> => {
    const made = await makeSpool(n, name);
    spools.push(made);
    return made;
  };
  try {
    const wordSpool = n >= 2 ? await spool('words') : null;
    const probSpool = await spool('probabilities');
    const backOffSpool = hasChildren ? await spool('back-off') : null;
    const startSpool = hasChildren ? await spool('children') : null;

    // The pass: word ids (and the checks of the rows: ascending, last ids in 1..V, order 1
    // complete), values, and which rows are contexts, with the bases and width of the children
    // offsets.
    const packer = new BitPacker(bitsFor(size));
    const previous = new Uint32Array(n);
    const isContext = new Uint8Array(hasChildren ? Math.ceil(rows / 8) : 0);
    const bases = new Uint32Array(hasChildren ? childBlocks(rows) : 0);
    let contexts = 0;
    let start = 0;
    let spanMax = 0;
    let row = 0;
    const noteRow = (): void => {
      if (row % CHILD_BLOCK_ROWS === 0) bases[row / CHILD_BLOCK_ROWS] = start;
      const span = start - bases[Math.floor(row / CHILD_BLOCK_ROWS)];
      if (span > spanMax) spanMax = span;
    };
    for await (const { batch, counts } of rowsWithChildren(source, n)) {
      const ids = batch.ids;
      if (n >= 2) {
        for (let i = 0; i < batch.rows; i++) {
          const at = i * n;
          if (row + i > 0) {
            let j = 0;
            while (j < n && ids[at + j] === previous[j]) j++;
            if (!(j < n && ids[at + j] > previous[j])) assert(false, `order ${n}: rows ascend and are distinct`);
          }
          for (let j = 0; j < n; j++) previous[j] = ids[at + j];
          const word = ids[at + n - 1];
          if (!(word >= 1 && word <= size)) assert(false, `order ${n}: a predicted word is a vocabulary id other than <s> (got ${word})`);
          packer.push(word);
        }
        await (wordSpool as Spool).write(packer.take());
      } else {
        for (let i = 0; i < batch.rows; i++) if (ids[i] !== row + i) assert(false, 'order 1: row = id');
      }
      checkValues(batch.log10Prob, n, 'probability');
      await probSpool.write(valueBytes(batch.log10Prob, spooledEncoding, null, 0, null, 0));
      if (hasChildren) {
        // Back-off weights of the rows that are contexts; the others are never read and are stored as 0.
        const values = new Float64Array(batch.rows);
        const starts = new Uint32Array(batch.rows);
        for (let i = 0; i < batch.rows; i++, row++) {
          noteRow();
          starts[i] = start;
          if (counts[i] > 0) {
            isContext[row >>> 3] |= 1 << (row & 7);
            contexts++;
            values[i] = batch.log10BackOff[i];
          }
          start += counts[i];
        }
        checkValues(values, n, 'back-off weight');
        await (backOffSpool as Spool).write(valueBytes(values, spooledEncoding, null, 0, null, 0));
        await (startSpool as Spool).write(bytesOf(starts));
      } else row += batch.rows;
    }
    assert(row === rows, `order ${n}: the rows read are the rows announced`);
    if (wordSpool !== null) await wordSpool.write(packer.finish());
    if (hasChildren) {
      assert(start === source.rowCounts[n], `order ${n}: children cover the rows of order ${n + 1}`);
      noteRow(); // the entry after the last row: the end of its children
      await (startSpool as Spool).write(bytesOf(Uint32Array.of(start)));
    }
    for (const made of spools) await made.close();

    // The sections, from the spools.
    if (wordSpool !== null) {
      out.begin(SectionKind.Words, n);
      for await (const piece of wordSpool.read(8)) await out.write(piece);
      await out.end();
    }
    await writeValues(out, SectionKind.Probabilities, SectionKind.ProbabilityCodebook, n, probSpool, encoding, quantBits, null, rows, valueUnit);
    if (!hasChildren) return;
    await writeValues(out, SectionKind.BackOffs, SectionKind.BackOffCodebook, n, backOffSpool as Spool, encoding, quantBits, isContext, contexts, valueUnit);

    // Children: the width, the bases, then each entry's offset from its block's base.
    out.begin(SectionKind.Children, n);
    const prefix = new Uint8Array(childOffsetsStart(rows));
    const prefixView = new DataView(prefix.buffer);
    prefixView.setUint32(0, bitsFor(spanMax), true);
    prefix.set(bytesOf(bases), 8);
    await out.write(prefix);
    const offsets = new BitPacker(bitsFor(spanMax));
    let entry = 0;
    for await (const piece of (startSpool as Spool).read(4)) {
      const starts = new Uint32Array(piece.buffer, piece.byteOffset, piece.length / 4);
      for (let i = 0; i < starts.length; i++, entry++) offsets.push(starts[i] - bases[Math.floor(entry / CHILD_BLOCK_ROWS)]);
      await out.write(offsets.take());
    }
    assert(entry === rows + 1, `order ${n}: one children entry per row and one after the last`);
    await out.write(offsets.finish());
    await out.end();
  } finally {
    await Promise.all(spools.map((made) => made.remove()));
  }
}

/**
 * A values section (and its codebook) from the spool of its values, which holds them as stored
 * (floats) or, for codes, as float64: the codebook is fitted on a pass over the spool
 * (`sampleForFit`: the `count` values of the rows in `include`, or of all rows), then every value
 * coded (rows outside `include` get code 0).
 */
async function writeValues(
  out: ModelFileWriter, kind: SectionKind, codebookKind: SectionKind, n: number, spool: Spool, encoding: ValueEncoding, quantBits: number,
  include: Uint8Array | null, count: number, unit: number,
): Promise<void> {
  const spooled = (): AsyncIterable<Float64Array> => float64Pieces(spool);
  const codebook = quantBits === 0 ? null : fitCodebook(await sampleForFit(spooled(), n, count, include), quantBits as 8 | 16);
  out.begin(kind, n);
  if (codebook === null) {
    for await (const piece of spool.read(unit)) await out.write(piece);
  } else {
    let first = 0;
    for await (const values of spooled()) {
      await out.write(valueBytes(values, encoding, codebook, quantBits, include, first));
      first += values.length;
    }
  }
  await out.end();
  if (codebook !== null) await out.section(codebookKind, n, bytesOf(codebook));
}

/** A spool of float64 values, piece by piece. */
async function* float64Pieces(spool: Spool): AsyncIterable<Float64Array> {
  for await (const piece of spool.read(8)) yield new Float64Array(piece.buffer, piece.byteOffset, piece.length / 8);
}

/**
 * The values a codebook is fitted on, from one pass over the values of order n: every k-th of the
 * `count` included values (all rows, or the contexts of `include`), k = ⌈count / QUANT_FIT_VALUES_MAX⌉,
 * so at most QUANT_FIT_VALUES_MAX of them (below that, all: the fit is exact when the values are
 * few); and −∞ once if any included value is −∞, so that it keeps a code of its own. Deterministic.
 */
async function sampleForFit(pieces: AsyncIterable<Float64Array>, n: number, count: number, include: Uint8Array | null): Promise<Float64Array> {
  const stride = Math.max(1, Math.ceil(count / QUANT_FIT_VALUES_MAX));
  const sample = new Float64Array(Math.ceil(count / stride) + 1);
  let taken = 0;
  let index = 0;
  let row = 0;
  let negativeInfinity = false;
  for await (const values of pieces) {
    for (let i = 0; i < values.length; i++, row++) {
      if (include !== null && (include[row >>> 3] & (1 << (row & 7))) === 0) continue;
      const value = values[i];
      if (value === -Infinity) negativeInfinity = true;
      else if (index % stride === 0) sample[taken++] = value;
      index++;
    }
  }
  assert(index === count, `order ${n}: the values read are the values counted`);
  if (negativeInfinity) sample[taken++] = -Infinity;
  return sample.subarray(0, taken);
}

/** Asserts that log10 values are finite or −∞ (a NaN or +∞ in a model is a programmer error). */
function checkValues(values: Float64Array, order: number, what: string): void {
  for (let i = 0; i < values.length; i++) {
    const value = values[i];
    if (!(Number.isFinite(value) || value === -Infinity)) assert(false, `order ${order}: a log10 ${what} is finite or −∞ (got ${value})`);
  }
}

/** One batch of values as stored: floats, or codes of `codebook` (rows outside `include`, which
 *  starts at row `first`, get code 0). */
function valueBytes(values: Float64Array, encoding: ValueEncoding, codebook: Codebook | null, bits: number, include: Uint8Array | null, first: number): Uint8Array {
  if (codebook === null) return bytesOf(encoding === ValueEncoding.Float64 ? values : Float32Array.from(values));
  let included: Uint8Array | undefined;
  if (include !== null) {
    included = new Uint8Array(values.length);
    for (let i = 0; i < values.length; i++) {
      const at = first + i;
      included[i] = (include[at >>> 3] >>> (at & 7)) & 1;
    }
  }
  return bytesOf(encodeValues(values, codebook, bits as 8 | 16, included));
}

/** The bytes of a typed array (little-endian on every machine this runs on: requireLittleEndian). */
function bytesOf(array: Uint8Array | Uint16Array | Uint32Array | Float32Array | Float64Array): Uint8Array {
  return new Uint8Array(array.buffer, array.byteOffset, array.byteLength);
}

/** The header (docs/model-file.md, "Header"): everything in it is known before the first section. */
function headerBytes(header: ModelHeader, rowCounts: number[], encoding: ValueEncoding): Buffer {
  const size = vocabularySize(header.vocabulary);
  const bytes = Buffer.alloc(HEADER_BYTES);
  MODEL_MAGIC.copy(bytes, H.magic);
  bytes.writeUInt16LE(MODEL_VERSION_MAJOR, H.versionMajor);
  bytes.writeUInt16LE(MODEL_VERSION_MINOR, H.versionMinor);
  bytes.writeUInt32LE(HEADER_BYTES, H.headerBytes);
  bytes.writeUInt32LE(header.normalised ? FLAG_NORMALISED : 0, H.flags);
  bytes.writeUInt32LE(header.order, H.order);
  bytes.writeUInt32LE(size, H.vocabularySize);
  bytes.writeUInt32LE(header.vocabulary.eosId, H.eosId);
  bytes.writeUInt32LE(header.vocabulary.unkId, H.unkId);
  bytes.writeUInt8(encoding, H.valueEncoding);
  bytes.writeUInt8(bitsFor(size), H.wordIdBits);
  // +0 turns a −0 into 0, so that equal models give equal bytes.
  bytes.writeDoubleLE(header.log10UnseenContextWeight + 0, H.log10UnseenContextWeight);
  rowCounts.forEach((rows, index) => bytes.writeBigUInt64LE(BigInt(rows), H.ngramCounts + 8 * index));
  bytes.writeUInt32LE(crc32(bytes.subarray(0, H.headerCrc)), H.headerCrc);
  return bytes;
}
