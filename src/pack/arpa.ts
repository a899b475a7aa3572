/**
 * The ARPA back-off text format: the open interchange format for n-gram models in back-off form.
 *
 *   \data\
 *   ngram 1=<rows of order 1>
 *   …
 *   ngram N=<rows of order N>
 *
 *   \1-grams:
 *   <log10 p>	<w>	<log10 bow>
 *   …
 *   \N-grams:
 *   <log10 p>	<w1 … wN>
 *
 *   \end\
 *
 * Fields are separated by a tab when written (any white space when read), the words of an n-gram by
 * one space. The back-off weight is written for the n-grams that are contexts of the next order and
 * omitted elsewhere (it is then 0, a weight of 1); the highest order has none.
 *
 * Values: log10, ARPA_SIGNIFICANT_DIGITS (7) significant digits in plain decimal notation, so each
 * value read back is within 5·10⁻⁷ of itself relatively. Probability 0 (log10 −∞: `<s>`'s unigram,
 * never predicted, and any other zero) is written as −99, which is common practice for `<s>`; when
 * reading, −99 and anything below it (and `-inf`) is taken as −∞.
 *
 * What the format cannot say — the method and its parameters, whether the numbers are probabilities
 * (stupid backoff's are not), the weight of backing off from an unseen context, the cutoffs, the
 * vocabulary cap and the text normalisation — Quern writes before `\data\` on one line `quern-model {JSON}`; ARPA readers ignore
 * text before `\data\`, and `readArpa` restores the model from it. The unigrams are written in id
 * order (`<s>` first), so a model read back has the same ids.
 *
 * Files may be gzip-compressed: written so for a name ending in `.gz`, read so when they start with
 * gzip's magic bytes.
 */
import { isUtf8 } from 'node:buffer';
import { once } from 'node:events';
import { promises as fsp } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Readable, Writable } from 'node:stream';
import { createGunzip, createGzip } from 'node:zlib';
import { assert, ioError, QuernError } from '../errors.ts';
import { BOS, BOS_ID, EOS, UNK, type VocabCap } from '../corpus/vocabulary.ts';
import { isNormalizeOptions, type NormalizeOptions } from '../corpus/types.ts';
import { vocabularySize } from '../estimate/counts.ts';
import { checkModel, type LanguageModel, type MethodParameters } from '../estimate/model.ts';
import { materialiseModel, modelSource, type ModelHeader, type ModelRowBatch, type ModelSource } from '../estimate/model-source.ts';
import { rowsWithChildren } from './child-counts.ts';
import { Log10Texts, LOG10_TEXT_MAX, TextOut, WordArena } from './arpa-text.ts';
import { FNV_OFFSET, FNV_PRIME, WordTable } from '../corpus/word-table.ts';
import { ArpaOrderRows, readBlocks, type ArpaRowsFile, type ArpaSpoolMaker } from './arpa-rows.ts';
import { Spool } from './spool.ts';
import { nodeFs, writeFileThrough, type StageFs } from '../job/fsio.ts';
import { openForReading } from '../job/file-read.ts';
import { ARPA_GZIP_LEVEL, ARPA_LINES_MAX, ARPA_LOG10_ZERO, DEFLATE_RATIO_MAX, ARPA_SORT_BYTES_DEFAULT, LINE_BYTES_MAX, ORDER_MAX, READ_BLOCK_BYTES } from '../limits.ts';

/** What Quern records about a model beside its ARPA tables (the `quern-model` line). */
export interface ArpaModelDescription {
  normalised: boolean;
  log10UnseenContextWeight: number;
  parameters: MethodParameters;
  cutoffs: number[];
  vocabularyCap: VocabCap | null;
  /** How the training text was normalised into tokens, when known. */
  normalize?: NormalizeOptions;
}

/** Prefix of the description line before `\data\`. */
const DESCRIPTION_PREFIX = 'quern-model ';

export { formatLog10 } from './arpa-text.ts';

/**
 * Writes `model` to `out` in the ARPA format (module comment), honouring back-pressure; resolves
 * when everything has been handed to the stream (the caller ends it). Throws QuernError 'input'
 * when a word contains white space, which the format cannot hold.
 */
export async function writeArpa(model: LanguageModel, out: NodeJS.WritableStream): Promise<void> {
  checkModel(model);
  await writeArpaSource(modelSource(model), out);
}

/**
 * `writeArpa` for a model read as a stream of rows (a packed model's `toModelSource()`, a job's
 * estimate): one pass over each order, with the next order beside it to tell which rows are
 * contexts (child-counts.ts), so no order is held in memory.
 */
export async function writeArpaSource(source: ModelSource, out: NodeJS.WritableStream): Promise<void> {
  const model = source.header;
  const { words } = model.vocabulary;
  for (const word of words) {
    if (word.length === 0 || /\s/.test(word)) throw new QuernError('input', `the word ${JSON.stringify(word)} is empty or contains white space, which the ARPA format cannot hold`);
  }
  const put = async (text: string | Buffer): Promise<void> => {
    const errored = (out as Partial<Writable>).errored;
    if (errored) throw errored;
    if (!out.write(text)) await drained(out);
  };
  const description: ArpaModelDescription = {
    normalised: model.normalised,
    log10UnseenContextWeight: model.log10UnseenContextWeight,
    parameters: model.parameters,
    cutoffs: model.cutoffs,
    vocabularyCap: model.vocabularyCap,
    ...(model.normalize === undefined ? {} : { normalize: model.normalize }),
  };
  let header = 'Written by Quern. ARPA readers skip the text before \\data\\; the next line tells Quern how the model was estimated.\n';
  header += `${DESCRIPTION_PREFIX}${JSON.stringify(description)}\n\n\\data\\\n`;
  source.rowCounts.forEach((rows, index) => (header += `ngram ${index + 1}=${rows}\n`));
  await put(header);

  // Lines are put together from the words' UTF-8 bytes and the values' texts (arpa-text.ts).
  const arena = new WordArena(words);
  const wordBytes = arena.bytes;
  const wordStarts = arena.starts;
  const text = new TextOut(put);
  const values = new Log10Texts();
  for (let n = 1; n <= model.order; n++) {
    if (!text.has(32)) await text.makeRoom(32);
    text.latin1(`\n\\${n}-grams:\n`);
    const lineMax = n * (arena.longest + 1) + 2 * (LOG10_TEXT_MAX + 1) + 1;
    let row = 0;
    // Rows that are contexts of the next order (they have children) carry a back-off weight.
    for await (const { batch, counts } of rowsWithChildren(source, n)) {
      const ids = batch.ids;
      for (let i = 0; i < batch.rows; i++, row++) {
        if (!text.has(lineMax)) await text.makeRoom(lineMax);
        text.latin1(values.of(n === 1 && row === BOS_ID ? -Infinity : batch.log10Prob[i]));
        text.byte(TAB);
        for (let j = 0; j < n; j++) {
          const id = ids[i * n + j];
          if (j > 0) text.byte(SPACE);
          text.bytes(wordBytes, wordStarts[id], wordStarts[id + 1]);
        }
        if (counts[i] > 0) {
          text.byte(TAB);
          text.latin1(values.of(batch.log10BackOff[i]));
        }
        text.byte(NEWLINE);
      }
    }
  }
  if (!text.has(16)) await text.makeRoom(16);
  text.latin1('\n\\end\\\n');
  await text.flush();
}

const TAB = 0x09;
const SPACE = 0x20;
const NEWLINE = 0x0a;

/** Resolves when `out` drains; rejects when it fails or closes first. */
function drained(out: NodeJS.WritableStream): Promise<void> {
  return new Promise((resolve, reject) => {
    const finish = (error?: Error): void => {
      out.off('drain', onDrain);
      out.off('error', onError);
      out.off('close', onClose);
      if (error === undefined) resolve();
      else reject(error);
    };
    const onDrain = (): void => finish();
    const onError = (error: Error): void => finish(error);
    const onClose = (): void => finish(new Error('the output closed before the model was written'));
    out.on('drain', onDrain);
    out.on('error', onError);
    out.on('close', onClose);
  });
}

/**
 * Writes `model` as an ARPA file atomically through `fs`: a temporary file beside `filePath`, fsync,
 * rename, directory fsync (no half-written file is ever left under `filePath`); gzip-compressed when
 * `filePath` ends in `.gz`.
 */
export async function writeArpaFile(model: LanguageModel | ModelSource, fs: StageFs, filePath: string): Promise<void> {
  await writeFileThrough(fs, filePath, async (file) => {
    const toFile = new Writable({
      highWaterMark: 1 << 20,
      write(chunk: Buffer, _encoding, callback) {
        file.write(chunk).then(() => callback(), callback);
      },
    });
    const finished = once(toFile, 'finish');
    finished.catch(() => undefined); // awaited below; writeArpa reports a failure first
    // A name ending in .gz: the text gzip-compressed on its way to the file.
    const out = filePath.endsWith('.gz') ? createGzip({ level: ARPA_GZIP_LEVEL }) : toFile;
    if (out !== toFile) {
      // A failure on either side ends both (a write that fails on disk must not leave the writer
      // waiting for gzip to drain).
      out.on('error', (error) => toFile.destroy(error));
      toFile.on('error', (error) => out.destroy(error));
      out.pipe(toFile);
    }
    await ('rows' in model ? writeArpaSource(model, out) : writeArpa(model, out));
    out.end();
    await finished;
  });
}

/** Options of `readArpa` and `openArpaSource`. */
export interface ArpaReadOptions {
  /**
   * How the model was estimated, for an ARPA file that Quern did not write (one without a
   * `quern-model` line); ignored when the file has one. Without either, reading fails: a
   * LanguageModel records its method, and nothing in the file says which it was.
   */
  description?: ArpaModelDescription;
  /** Bytes for sorting one order's n-grams in memory (arpa-rows.ts); default ARPA_SORT_BYTES_DEFAULT. */
  sortBytes?: number;
  /**
   * For a file without a `quern-model` line and no `description`: read it as what the format
   * itself says, a back-off model of log10 probabilities (normalised, a context never seen backs
   * off with weight 1), with method `imported`, no cutoffs and no vocabulary cap. Without this (or
   * a description), reading such a file fails.
   */
  imported?: boolean;
}

/** What `imported` assumes of an ARPA file of order `order` that does not describe itself. */
export function importedDescription(order: number): ArpaModelDescription {
  return { normalised: true, log10UnseenContextWeight: 0, parameters: { method: 'imported' }, cutoffs: Array.from({ length: order }, () => 1), vocabularyCap: null };
}

/** An ARPA file read as a model source, its orders ≥ 2 sorted into files; `remove` deletes them. */
export interface ArpaSource extends ModelSource {
  remove(): Promise<void>;
}

/**
 * Reads an ARPA file into a `ModelSource` without holding its n-grams in memory: the unigrams stay
 * in memory, each higher order is sorted into id order in a file made by `spools` (arpa-rows.ts)
 * within `sortBytes`, and `rows` streams those files. Ids: `<s>` is 0 and the other unigrams
 * follow in file order (a file Quern wrote keeps its ids); a file without `<unk>` gets one with
 * probability 0. Throws QuernError 'input' naming the file and line for anything the format does
 * not allow (and for n-grams whose context is missing, `<s>` after the first position, back-off
 * weights at the highest order, counts that disagree with `\data\`, an n-gram twice), 'io' when the
 * file cannot be read; the files made so far are deleted then.
 */
export async function openArpaSource(filePath: string, spools: ArpaSpoolMaker, options: ArpaReadOptions = {}): Promise<ArpaSource> {
  const sortBytes = options.sortBytes ?? ARPA_SORT_BYTES_DEFAULT;
  assert(Number.isFinite(sortBytes) && sortBytes > 0, 'the ARPA sort budget is a positive number of bytes');
  const { handle, bytes: fileBytes } = await openForReading(filePath);
  let parser: ArpaParser | null = null;
  try {
    const gzip = await isGzip(handle, filePath);
    // The text a gzip file holds is at most DEFLATE_RATIO_MAX times its size: the bound on what
    // `\data\` may declare.
    parser = new ArpaParser(filePath, gzip ? fileBytes * DEFLATE_RATIO_MAX : fileBytes, sortBytes, spools);
    let carry: Buffer = Buffer.alloc(0);
    for await (const block of textBlocks(handle, filePath, gzip, () => (parser as ArpaParser).lineNumber + 1)) {
      const bytes = carry.length === 0 ? block : Buffer.concat([carry, block]);
      const last = bytes.lastIndexOf(0x0a);
      if (last < 0) {
        if (bytes.length > LINE_BYTES_MAX) throw parser.error(`a line is longer than ${LINE_BYTES_MAX} bytes`, parser.lineNumber + 1);
        carry = Buffer.from(bytes);
        continue;
      }
      await parser.block(bytes, last);
      carry = Buffer.from(bytes.subarray(last + 1));
    }
    if (carry.length > 0) await parser.block(carry, carry.length);
    return await parser.finish(options.description, options.imported === true);
  } catch (error) {
    await parser?.remove();
    throw error;
  } finally {
    await handle.close().catch(() => undefined);
  }
}

/** Whether the file starts with gzip's magic bytes (1f 8b). */
async function isGzip(handle: fsp.FileHandle, filePath: string): Promise<boolean> {
  const magic = Buffer.alloc(2);
  try {
    const { bytesRead } = await handle.read(magic, 0, 2, 0);
    return bytesRead === 2 && magic[0] === 0x1f && magic[1] === 0x8b;
  } catch (cause) {
    throw ioError('read', filePath, cause);
  }
}

/**
 * The file's text in blocks (views valid until the next one): read as it is, or through gunzip.
 * A failing read is an 'io' QuernError; damaged or truncated gzip data an 'input' one at the line
 * `lineAt()` gives.
 */
async function* textBlocks(handle: fsp.FileHandle, filePath: string, gzip: boolean, lineAt: () => number): AsyncGenerator<Buffer> {
  const source = handle.createReadStream({ start: 0, highWaterMark: READ_BLOCK_BYTES, autoClose: false });
  let sourceError: unknown;
  source.on('error', (cause) => (sourceError = cause));
  const stream: Readable = gzip ? source.pipe(createGunzip({ chunkSize: READ_BLOCK_BYTES })) : source;
  if (gzip) source.on('error', (cause) => stream.destroy(cause as Error));
  const blocks = stream[Symbol.asyncIterator]();
  try {
    for (;;) {
      let next: IteratorResult<Buffer>;
      try {
        next = await blocks.next();
      } catch (cause) {
        if (sourceError !== undefined || !gzip) throw ioError('read', filePath, sourceError ?? cause);
        const line = lineAt();
        throw new QuernError('input', `${filePath}:${line}: truncated or corrupt gzip data (${(cause as Error).message ?? String(cause)})`, { cause, location: { file: filePath, line } });
      }
      if (next.done) return;
      yield next.value;
    }
  } finally {
    await blocks.return?.(undefined).catch(() => undefined);
    source.destroy();
  }
}

/**
 * Reads an ARPA file into a `LanguageModel` (`openArpaSource` with its files in a temporary
 * folder, read back whole): for models that fit in memory. Same ids and errors.
 */
export async function readArpa(filePath: string, options: ArpaReadOptions = {}): Promise<LanguageModel> {
  const folder = await fsp.mkdtemp(join(tmpdir(), 'quern-arpa-'));
  try {
    const source = await openArpaSource(filePath, (n, name) => Spool.create(nodeFs, join(folder, `o${n}-${name}.tmp`)), options);
    try {
      return await materialiseModel(source);
    } finally {
      await source.remove();
    }
  } finally {
    await fsp.rm(folder, { recursive: true, force: true });
  }
}

/** The error for `bytes` (whole lines that are not valid UTF-8, the first at the line after
 *  `parser.lineNumber`): the first line that is not, named. */
function utf8Error(bytes: Uint8Array, parser: ArpaParser): QuernError {
  let line = parser.lineNumber;
  for (let start = 0; ; ) {
    line++;
    const end = bytes.indexOf(0x0a, start);
    if (end < 0 || !isUtf8(bytes.subarray(start, end))) return parser.error('not valid UTF-8', line);
    start = end + 1;
  }
}

/** ASCII white space as JavaScript's `\s` has it: tab, line feed, vertical tab, form feed, carriage
 *  return, space. */
function isAsciiSpace(byte: number): boolean {
  return byte === 0x20 || (byte >= 0x09 && byte <= 0x0d);
}

/** 10^0 … 10^22: the powers of ten a double holds exactly. */
const EXACT_POWERS_OF_TEN = Array.from({ length: 23 }, (_, k) => Number(`1e${k}`));

/**
 * A log10 value from its bytes, as `ArpaParser.value` reads it (the same double as `Number` of the
 * text); NaN for one it refuses. Plain decimals of up to 15 significant digits and 22 decimal
 * places — all that Quern writes — are read from the digits: the integer of the digits divided by
 * the power of ten, both exact doubles, is the correctly rounded value (common practice in decimal
 * readers: the quotient of two exact doubles is rounded once). Anything else goes through `Number`.
 */
export function log10ValueOfBytes(bytes: Buffer, start: number, end: number): number {
  let i = start;
  const negative = bytes[i] === 0x2d;
  if (negative || bytes[i] === 0x2b) i++;
  let mantissa = 0;
  let digits = 0;
  let places = 0;
  let seenDigit = false;
  let seenPoint = false;
  for (; i < end; i++) {
    const c = bytes[i];
    if (c >= 0x30 && c <= 0x39) {
      seenDigit = true;
      if (seenPoint) places++;
      if (mantissa === 0 && c === 0x30) continue;
      if (digits === 15) return textValue(bytes, start, end);
      mantissa = mantissa * 10 + (c - 0x30);
      digits++;
    } else if (c === 0x2e && !seenPoint) {
      seenPoint = true;
    } else {
      return textValue(bytes, start, end);
    }
  }
  if (!seenDigit || places >= EXACT_POWERS_OF_TEN.length) return textValue(bytes, start, end);
  const magnitude = places === 0 ? mantissa : mantissa / EXACT_POWERS_OF_TEN[places];
  const value = negative ? -magnitude : magnitude;
  return value <= ARPA_LOG10_ZERO ? -Infinity : value;
}

/** `log10ValueOfBytes` through the text and `Number`. */
function textValue(bytes: Buffer, start: number, end: number): number {
  const text = bytes.toString('latin1', start, end);
  if (text === '-inf' || text === '-Infinity') return -Infinity;
  const value = Number(text);
  if (!Number.isFinite(value)) return NaN;
  return value <= ARPA_LOG10_ZERO ? -Infinity : value;
}

/** The order being read: how many n-grams `\data\` declares and how many came. */
interface OrderProgress {
  order: number;
  declared: number;
  count: number;
}

const NGRAM_COUNT = /^ngram\s+(\d+)\s*=\s*(\d+)$/;
const SECTION_START = /^\\(\d+)-grams:$/;

/** Rows of order 1 per batch of the source. */
const UNIGRAM_BATCH_ROWS = 65_536;

/**
 * The ARPA reader's state machine, fed line by line. Unigrams are kept in memory; the n-grams of
 * each higher order go to an ArpaOrderRows (sorted on disk), which the parser waits for (`lines`
 * awaits) when its buffer is full and when an order ends.
 */
class ArpaParser {
  lineNumber = 0;
  private state: 'preamble' | 'data' | 'ngrams' | 'end' = 'preamble';
  private description: ArpaModelDescription | null = null;
  private declared: number[] = [];
  private current: OrderProgress | null = null;
  private readonly ended: OrderProgress[] = [];
  /** Unigram words in file order, word → index in that order, and their values. */
  private unigramWords: string[] = [];
  private unigramIndex = new Map<string, number>();
  private unigramProb = new Float64Array(0);
  private unigramBackOff = new Float64Array(0);
  /** Word → id, fixed when the unigrams are complete. */
  private vocabularyWords: string[] = [];
  /** Orders ≥ 2: the one being read, the one that has ended and is not finished yet, and the
   *  sorted files of those finished (index order − 2). */
  private rows: ArpaOrderRows | null = null;
  private endedRows: ArpaOrderRows | null = null;
  /** An order ≥ 2 whose section has begun and whose rows are not made yet (0: none). */
  private pendingOrder = 0;
  private readonly files: ArpaRowsFile[] = [];
  private readonly ids = new Uint32Array(ORDER_MAX);
  /** The vocabulary once the unigrams are read (its entries are the ids), for the byte path and
   *  the text path alike; and each field of the byte path's line at hand: where it starts and ends
   *  and its FNV-1a hash. */
  private wordTable: WordTable | null = null;
  private readonly fieldStart = new Int32Array(ORDER_MAX + 2);
  private readonly fieldEnd = new Int32Array(ORDER_MAX + 2);
  private readonly fieldHash = new Int32Array(ORDER_MAX + 2);

  constructor(private readonly file: string, private readonly fileBytes: number, private readonly sortBytes: number, private readonly spools: ArpaSpoolMaker) {}

  error(message: string, line = this.lineNumber): QuernError {
    return new QuernError('input', `${this.file}:${line}: ${message}`, { location: { file: this.file, line } });
  }

  /**
   * Feeds the lines of bytes[0, end) (whole lines, '\n'-separated). The n-gram lines of orders ≥ 2
   * take the byte path (`byteEntry`: no string per line or word); every other line, and any n-gram
   * line the byte path does not take, is decoded and goes through `line` as text. Text that is not
   * valid UTF-8 stops the read at its first bad line.
   */
  async block(bytes: Buffer, end: number): Promise<void> {
    if (!isUtf8(bytes.subarray(0, end))) throw utf8Error(bytes.subarray(0, end), this);
    // A byte-order mark at the start of the file is not text.
    let start = this.lineNumber === 0 && end >= 3 && bytes[0] === 0xef && bytes[1] === 0xbb && bytes[2] === 0xbf ? 3 : 0;
    while (start <= end) {
      let stop = bytes.indexOf(0x0a, start);
      if (stop < 0 || stop > end) stop = end;
      const lineEnd = stop > start && bytes[stop - 1] === 0x0d ? stop - 1 : stop;
      if (this.endedRows !== null || this.pendingOrder !== 0 || this.rows?.full) await this.settle();
      if (this.lineNumber === ARPA_LINES_MAX) throw this.error(`more than ${ARPA_LINES_MAX} lines`);
      this.lineNumber++;
      if (!(this.state === 'ngrams' && this.byteEntry(bytes, start, lineEnd))) this.line(bytes.toString('utf8', start, lineEnd).trim());
      start = stop + 1;
    }
    await this.settle();
  }

  /**
   * An n-gram line of order ≥ 2 read from its bytes: what `entry` does, for a line that is
   * well-formed. Returns false, changing nothing, for anything else (a blank or section line, a
   * field count or value or word that `entry` would refuse), which the caller then reads as text:
   * the errors are `entry`'s. Fields are split at ASCII white space only; a line with other white
   * space that `\s` splits at (U+00A0, U+3000, …) has a field that is no number and no word (the
   * words come from unigram lines split at all of it), so it goes to the text path as well.
   */
  private byteEntry(bytes: Buffer, start: number, end: number): boolean {
    const current = this.current as OrderProgress;
    const n = current.order;
    if (n < 2 || current.count >= current.declared) return false;
    const fieldStart = this.fieldStart;
    const fieldEnd = this.fieldEnd;
    const hashes = this.fieldHash;
    let fields = 0;
    let i = start;
    while (i < end && isAsciiSpace(bytes[i])) i++;
    if (i === end || bytes[i] === 0x5c) return false;
    while (i < end) {
      if (fields === n + 2) return false;
      fieldStart[fields] = i;
      let hash = FNV_OFFSET;
      for (; i < end; i++) {
        const byte = bytes[i];
        if (isAsciiSpace(byte)) break;
        hash = Math.imul(hash ^ byte, FNV_PRIME);
      }
      fieldEnd[fields] = i;
      hashes[fields] = hash;
      fields++;
      while (i < end && isAsciiSpace(bytes[i])) i++;
    }
    if (fields !== n + 1 && fields !== n + 2) return false;
    if (fields === n + 2 && n === this.declared.length) return false;
    const prob = log10ValueOfBytes(bytes, fieldStart[0], fieldEnd[0]);
    const backOff = fields === n + 2 ? log10ValueOfBytes(bytes, fieldStart[n + 1], fieldEnd[n + 1]) : 0;
    if (Number.isNaN(prob) || Number.isNaN(backOff)) return false;
    const table = this.wordTable as WordTable;
    const ids = this.ids;
    for (let k = 0; k < n; k++) {
      const id = table.find(bytes, fieldStart[k + 1], fieldEnd[k + 1], hashes[k + 1]);
      if (id < 0 || (id === BOS_ID && k > 0)) return false;
      ids[k] = id;
    }
    current.count++;
    (this.rows as ArpaOrderRows).add(ids, prob, backOff, this.lineNumber);
    return true;
  }

  /** Writes a full buffer out; sorts and checks an order that has ended, and only then (so that
   *  two orders' buffers never take memory at once) makes the next order's. */
  private async settle(): Promise<void> {
    if (this.rows?.full) await this.rows.flush();
    if (this.endedRows !== null) {
      const rows = this.endedRows;
      this.endedRows = null;
      try {
        this.files.push(await rows.finish(this.files.length > 0 ? this.files[this.files.length - 1] : null));
      } catch (error) {
        await rows.remove();
        throw error;
      }
    }
    if (this.pendingOrder !== 0) {
      this.rows = new ArpaOrderRows(this.pendingOrder, this.sortBytes, this.spools, this);
      this.pendingOrder = 0;
    }
  }

  private line(line: string): void {
    switch (this.state) {
      case 'preamble':
        if (line === '\\data\\') this.state = 'data';
        else if (line.startsWith(DESCRIPTION_PREFIX)) this.description = this.parseDescription(line.slice(DESCRIPTION_PREFIX.length));
        return;
      case 'data': {
        if (line.length === 0) return;
        const count = NGRAM_COUNT.exec(line);
        if (count !== null) {
          const n = Number(count[1]);
          if (n !== this.declared.length + 1) throw this.error(`expected "ngram ${this.declared.length + 1}=…", found order ${n}`);
          if (n > ORDER_MAX) throw this.error(`order ${n} is above the highest order Quern reads, ${ORDER_MAX}`);
          const rows = Number(count[2]);
          if (!Number.isSafeInteger(rows) || rows * (2 * n + 1) > this.fileBytes) throw this.error(`${count[2]} n-grams of order ${n} cannot fit in a file of ${this.fileBytes} bytes`);
          this.declared.push(rows);
          return;
        }
        if (SECTION_START.test(line)) {
          if (this.declared.length === 0) throw this.error('\\data\\ declares no n-gram counts');
          this.startOrder(line);
          return;
        }
        throw this.error(`expected "ngram n=count" or "\\1-grams:" after \\data\\, found ${JSON.stringify(line.slice(0, 80))}`);
      }
      case 'ngrams': {
        if (line.length === 0) return;
        if (line === '\\end\\') {
          this.endOrder();
          if (this.ended.length !== this.declared.length) throw this.error(`\\end\\ after order ${this.ended.length}; \\data\\ declares ${this.declared.length} orders`);
          this.state = 'end';
          return;
        }
        if (SECTION_START.test(line)) {
          this.endOrder();
          this.startOrder(line);
          return;
        }
        this.entry(line);
        return;
      }
      case 'end':
        if (line.length > 0) throw this.error('text after \\end\\');
    }
  }

  private parseDescription(text: string): ArpaModelDescription {
    let json: Partial<ArpaModelDescription>;
    try {
      json = JSON.parse(text) as Partial<ArpaModelDescription>;
    } catch {
      throw this.error('the quern-model line is not valid JSON');
    }
    const valid =
      typeof json === 'object' && json !== null &&
      typeof json.normalised === 'boolean' &&
      typeof json.log10UnseenContextWeight === 'number' && Number.isFinite(json.log10UnseenContextWeight) &&
      typeof json.parameters === 'object' && json.parameters !== null && typeof (json.parameters as { method?: unknown }).method === 'string' &&
      Array.isArray(json.cutoffs) && json.cutoffs.every((cutoff) => Number.isSafeInteger(cutoff) && cutoff >= 1) &&
      (json.vocabularyCap === null || (typeof json.vocabularyCap === 'object' && !Array.isArray(json.vocabularyCap))) &&
      (json.normalize === undefined || isNormalizeOptions(json.normalize));
    if (!valid) throw this.error('the quern-model line lacks normalised, log10UnseenContextWeight, parameters, cutoffs or vocabularyCap, or its normalize is not { lowercase, unicode, split }');
    return json as ArpaModelDescription;
  }

  private startOrder(line: string): void {
    const n = Number((SECTION_START.exec(line) as RegExpExecArray)[1]);
    if (n !== this.ended.length + 1) throw this.error(`expected \\${this.ended.length + 1}-grams:, found \\${n}-grams:`);
    if (n > this.declared.length) throw this.error(`\\${n}-grams: but \\data\\ declares ${this.declared.length} orders`);
    const rows = this.declared[n - 1];
    if (n === 1) {
      this.unigramProb = new Float64Array(rows);
      this.unigramBackOff = new Float64Array(rows);
    } else {
      this.fixVocabulary();
      this.pendingOrder = n;
    }
    this.current = { order: n, declared: rows, count: 0 };
    this.state = 'ngrams';
  }

  private endOrder(): void {
    const current = this.current as OrderProgress;
    if (current.count !== current.declared) throw this.error(`order ${current.order} has ${current.count} n-grams; \\data\\ declares ${current.declared}`);
    this.ended.push(current);
    if (current.order === 1) this.fixVocabulary();
    else {
      this.endedRows = this.rows;
      this.rows = null;
    }
  }

  private value(field: string, what: string): number {
    if (field === '-inf' || field === '-Infinity') return -Infinity;
    const value = Number(field);
    if (field.length === 0 || !Number.isFinite(value)) throw this.error(`the ${what} ${JSON.stringify(field)} is not a number`);
    return value <= ARPA_LOG10_ZERO ? -Infinity : value;
  }

  private entry(line: string): void {
    const current = this.current as OrderProgress;
    const n = current.order;
    const fields = line.split(/\s+/);
    const highest = n === this.declared.length;
    if (fields.length === n + 2 && highest) throw this.error(`a back-off weight at the highest order ${n}`);
    if (fields.length !== n + 1 && fields.length !== n + 2) throw this.error(`an entry of order ${n} has a log10 probability, ${n} word${n === 1 ? '' : 's'} and an optional back-off weight (found ${fields.length} fields)`);
    if (current.count >= current.declared) throw this.error(`more n-grams of order ${n} than the ${current.declared} \\data\\ declares`);
    const row = current.count++;
    const prob = this.value(fields[0], 'log10 probability');
    const backOff = fields.length === n + 2 ? this.value(fields[n + 1], 'log10 back-off weight') : 0;
    if (n === 1) {
      const word = fields[1];
      if (this.unigramIndex.has(word)) throw this.error(`the unigram ${word} appears twice`);
      this.unigramIndex.set(word, this.unigramWords.length);
      this.unigramWords.push(word);
      this.unigramProb[row] = prob;
      this.unigramBackOff[row] = backOff;
      return;
    }
    const table = this.wordTable as WordTable;
    const ids = this.ids;
    for (let i = 0; i < n; i++) {
      const id = table.findWord(fields[1 + i]);
      if (id < 0) throw this.error(`the word ${JSON.stringify(fields[1 + i])} is not among the unigrams`);
      if (id === BOS_ID && i > 0) throw this.error(`<s> is a context only; it cannot follow another word`);
      ids[i] = id;
    }
    (this.rows as ArpaOrderRows).add(ids, prob, backOff, this.lineNumber);
  }

  /** Ids: `<s>` 0, then the unigrams in file order; `<unk>` added when missing. */
  private fixVocabulary(): void {
    if (this.wordTable !== null) return;
    if (!this.unigramIndex.has(EOS)) throw this.error(`the unigrams lack </s>`);
    const words = [BOS, ...this.unigramWords.filter((word) => word !== BOS)];
    if (!this.unigramIndex.has(UNK)) words.push(UNK);
    this.vocabularyWords = words;
    // The words by their bytes (the byte path) and as text (findWord): entries are given in order,
    // so an entry is its word's id.
    const table = WordTable.sizedFor(words.length);
    words.forEach((word, id) => assert(table.internWord(word) === id, 'a word table entry is its word\'s id'));
    this.wordTable = table;
  }

  /** The model source over what was read. */
  async finish(given: ArpaModelDescription | undefined, imported: boolean): Promise<ArpaSource> {
    if (this.state !== 'end') throw this.error(this.state === 'preamble' ? 'no \\data\\ line: not an ARPA file' : 'the file ends before \\end\\');
    assert(this.endedRows === null && this.rows === null && this.pendingOrder === 0, 'every order is sorted at \\end\\');
    const order = this.ended.length;
    const description = this.description ?? given ?? (imported ? importedDescription(order) : undefined);
    if (description === undefined) {
      throw new QuernError('input', `${this.file}: no quern-model line says how this model was estimated; pass the description option (method, parameters, cutoffs) or imported: true to read a model Quern did not write`, { location: { file: this.file } });
    }
    if (description.cutoffs.length !== order) throw new QuernError('input', `${this.file}: the description gives ${description.cutoffs.length} cutoffs for a model of order ${order}`, { location: { file: this.file } });
    const words = this.vocabularyWords;
    const table = this.wordTable as WordTable;
    const size = words.length - 1;

    const log10Prob = new Float64Array(size + 1).fill(-Infinity);
    const log10BackOff = new Float64Array(size + 1);
    this.unigramWords.forEach((word, index) => {
      const id = table.findWord(word);
      log10Prob[id] = this.unigramProb[index];
      log10BackOff[id] = this.unigramBackOff[index];
    });
    log10Prob[BOS_ID] = -Infinity; // never predicted (its ARPA value is a placeholder)
    const header: ModelHeader = {
      order,
      vocabulary: { words, eosId: table.findWord(EOS), unkId: table.findWord(UNK) },
      normalised: description.normalised,
      parameters: description.parameters,
      cutoffs: [...description.cutoffs],
      vocabularyCap: description.vocabularyCap,
      ...(description.normalize === undefined ? {} : { normalize: { ...description.normalize } }),
      log10UnseenContextWeight: description.log10UnseenContextWeight,
    };
    assert(vocabularySize(header.vocabulary) === size, 'ARPA vocabulary size');
    const files = this.files;
    return {
      header,
      rowCounts: [size + 1, ...files.map((file) => file.rows)],
      async *rows(n: number): AsyncIterable<ModelRowBatch> {
        assert(Number.isInteger(n) && n >= 1 && n <= order, `order in [1, ${order}]`);
        if (n === 1) {
          for (let start = 0; start <= size; start += UNIGRAM_BATCH_ROWS) {
            const end = Math.min(size + 1, start + UNIGRAM_BATCH_ROWS);
            const ids = new Uint32Array(end - start);
            for (let i = 0; i < ids.length; i++) ids[i] = start + i;
            yield { rows: end - start, ids, log10Prob: log10Prob.slice(start, end), log10BackOff: log10BackOff.slice(start, end) };
          }
          return;
        }
        // Copies: a block's views are overwritten by the next read.
        for await (const block of readBlocks(files[n - 2])) {
          yield { rows: block.rows, ids: block.ids.slice(0, block.rows * n), log10Prob: block.prob.slice(0, block.rows), log10BackOff: block.backOff.slice(0, block.rows) };
        }
      },
      remove: () => this.remove(),
    };
  }

  /** Deletes every file the sort has made. */
  async remove(): Promise<void> {
    await this.rows?.remove();
    await this.endedRows?.remove();
    for (const file of this.files) await file.spool.remove();
    this.files.length = 0;
  }

  ngramText(ids: Uint32Array, at: number, length: number): string {
    const words: string[] = [];
    for (let i = 0; i < length; i++) words.push(this.vocabularyWords[ids[at + i]]);
    return words.join(' ');
  }
}
