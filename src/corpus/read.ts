/**
 * Chunk reader: streams one chunk of an input (plain or gzip, text or JSONL), checks it, splits it
 * into lines and hands each sentence on. This is the hot path of a long job: blocks of complete
 * lines are validated and decoded at once, and lines are cut from the decoded string, so plain
 * text costs no allocation per line beyond the line's own string.
 */
import { isUtf8 } from 'node:buffer';
import { createReadStream } from 'node:fs';
import { assert, formatLocation, ioError, QuernError, type InputLocation } from '../errors.ts';
import { LINE_BYTES_MAX, READ_BLOCK_BYTES, SKIPPED_SAMPLES_PER_FILE_MAX } from '../limits.ts';
import { makeRecordReader, type RecordReader } from './jsonl.ts';
import { fileText } from './text-stream.ts';
import { countNewlines, forEachLine, isBlankLine } from './lines.ts';
import { isChunkPiece, isTextRange, ofStdin, type Chunk, type ChunkPiece, type InputFile, type ReadOptions, type ReadStats, type SkippedSample } from './types.ts';

/** Receives one sentence: the raw text of a line (no normalisation yet), never blank, and the line
 *  it is on, counted from 1 at the chunk's first line (JSONL: the record's line; each line of its
 *  text is a sentence of that line). */
export type SentenceHandler = (text: string, lineInChunk: number) => void;

/** What a `LinesHandler` found in the lines it was given. */
export interface LinesSeen {
  lines: number;
  /** Lines that are empty or hold only white space (the JS `\s` set). */
  blankLines: number;
}

/**
 * Receives whole lines as bytes: bytes[start, end) is valid UTF-8 and holds complete lines, each
 * ending with '\n' except a final line of the input without one. A trailing '\r' is left in the
 * line (it is white space); a UTF-8 byte-order mark at the start of the file is not included.
 * Returns the lines it found and how many of them were blank, for the read statistics (a line
 * that is not blank is a sentence).
 */
export type LinesHandler = (bytes: Buffer, start: number, end: number) => LinesSeen;

/**
 * Receives the input bytes consumed so far in this chunk (compressed bytes for gzip), after each
 * block. When it returns a promise, reading waits for it: the count worker spills there, between
 * blocks, since a spill writes files and the sentence callback is synchronous.
 */
export type ProgressHandler = (bytesRead: number) => void | Promise<void>;

/**
 * A skipped line as `readChunk` reports it. `line` is absolute only for a chunk that starts at
 * byte 0 (every gzip chunk and the first chunk of a plain file) or a ChunkPiece, which knows the
 * lines before it; otherwise it is undefined, since
 * finding it would mean reading the file from its start, and the caller completes it as
 * (lines of the file's earlier chunks) + `lineInChunk`. `byteOffset` is always absolute.
 */
export interface ChunkSkippedSample extends SkippedSample {
  /** 1-based line number counted from the chunk's first line. */
  lineInChunk: number;
}

/** ReadStats whose samples also carry the line number within the chunk. */
export interface ChunkReadStats extends ReadStats {
  skippedSamples: ChunkSkippedSample[];
}

/**
 * Reads one chunk of `file` and calls `onSentence` for each sentence in it, in input order.
 *
 * Lines end at byte 0x0A; a trailing '\r' is removed; a UTF-8 byte-order mark at the start of the
 * file is dropped. Text input: every non-blank line is a sentence. JSONL input: every non-blank line
 * is a record, parsed with stream-json's JSONL line parser; the string at `options.textField` is
 * split into lines, each non-blank one a sentence. Blank lines (white space only), in the file or
 * in a text field, are counted in `emptyLines`.
 *
 * Bad input — malformed JSON, a missing or non-string text field, invalid UTF-8, a line longer than
 * LINE_BYTES_MAX — throws an 'input' QuernError whose message names the cause and whose location
 * holds the file, the absolute 1-based line number and the byte offset of the line's start (in the
 * decompressed stream for gzip, as the message says). With `options.skipBad` such lines are
 * skipped instead and counted in `skipped`, with at most SKIPPED_SAMPLES_PER_FILE_MAX samples kept
 * per chunk (the caller keeps that many per file). Truncated or corrupt gzip data and read failures
 * are fatal even with `skipBad`: nothing after them can be read, so skipping would lose input
 * silently.
 *
 * @param options `options.format` must equal `file.format`; JSONL needs a non-empty `textField`.
 * @param onProgress called after each block read, with the cumulative bytes read in this chunk.
 * @throws QuernError 'input' (bad data, truncated gzip, a file changed since it was planned),
 *   'io' (unreadable file), 'config' (JSONL without a text field).
 */
export async function readChunk(
  file: InputFile,
  chunk: Chunk,
  options: ReadOptions,
  onSentence: SentenceHandler,
  onProgress?: ProgressHandler,
): Promise<ChunkReadStats> {
  checkChunk(file, chunk, options);
  let readRecord: RecordReader | undefined;
  if (options.format === 'jsonl') {
    if (options.textField === undefined || options.textField.length === 0) {
      throw new QuernError('config', 'textField: JSONL input needs the path of its text field, e.g. body.text');
    }
    readRecord = makeRecordReader(options.textField);
  }
  return readWith(file, chunk, new LineReader(chunk.byteStart, lineBaseOf(chunk), options.skipBad, onSentence, readRecord), onProgress);
}

/**
 * `readChunk` for text input whose consumer splits lines itself: hands over blocks of whole lines
 * as bytes (validated UTF-8; one call per read block, or per line around a bad or carried one)
 * instead of one string per sentence, so a byte-level tokenizer never decodes the text. Checks,
 * errors, `skipBad`, progress and the returned statistics are those of `readChunk`, except that
 * `lines`, `sentences` and `emptyLines` come from what `onLines` reports.
 *
 * @param options `options.format` must be 'text' (JSONL records are parsed as strings: use `readChunk`).
 */
export async function readChunkLines(
  file: InputFile,
  chunk: Chunk,
  options: ReadOptions,
  onLines: LinesHandler,
  onProgress?: ProgressHandler,
): Promise<ChunkReadStats> {
  checkChunk(file, chunk, options);
  assert(options.format === 'text', `readChunkLines reads text input, not ${options.format}`);
  return readWith(file, chunk, new LineReader(chunk.byteStart, lineBaseOf(chunk), options.skipBad, undefined, undefined, onLines), onProgress);
}

/** The absolute line before the chunk's first, when it is known without reading: 0 at byte 0. */
function lineBaseOf(chunk: Chunk): number | undefined {
  if (chunk.linesBefore !== undefined) return chunk.linesBefore;
  return chunk.byteStart === 0 ? 0 : undefined;
}

function checkChunk(file: InputFile, chunk: Chunk, options: ReadOptions): void {
  assert(options.format === file.format, `ReadOptions.format (${options.format}) must equal the file's format (${file.format})`);
  if (isChunkPiece(chunk)) {
    assert((file.gzip || file.stdin === true) && chunk.byteStart >= 0 && chunk.byteEnd - chunk.byteStart === chunk.data.length, `piece ${chunk.index} of ${file.path} (gzip or standard input) holds the ${chunk.byteEnd - chunk.byteStart} bytes of its range`);
    return;
  }
  assert(file.stdin !== true, `chunk ${chunk.index}: standard input is read only in pieces`);
  if (isTextRange(chunk)) {
    assert(file.gzip && Number.isSafeInteger(chunk.byteStart) && chunk.byteStart >= 0 && chunk.byteStart <= chunk.byteEnd, `chunk ${chunk.index}: a range ${chunk.byteStart}..${chunk.byteEnd} of decompressed text belongs to a gzip input`);
    return;
  }
  assert(
    Number.isSafeInteger(chunk.byteStart) && chunk.byteStart >= 0 && chunk.byteStart <= chunk.byteEnd && chunk.byteEnd <= file.bytes,
    `chunk ${chunk.index} range ${chunk.byteStart}..${chunk.byteEnd} lies within ${file.path} (${file.bytes} bytes)`,
  );
  assert(!file.gzip || (chunk.byteStart === 0 && chunk.byteEnd === file.bytes), 'a gzip input is read as one whole chunk');
}

async function readWith(
  file: InputFile,
  chunk: Chunk,
  reader: LineReader,
  onProgress: ProgressHandler | undefined,
): Promise<ChunkReadStats> {
  try {
    if (isChunkPiece(chunk)) await readPiece(chunk, reader, onProgress);
    else if (isTextRange(chunk)) await readGzip(file, reader, onProgress, chunk);
    else if (file.gzip) await readGzip(file, reader, onProgress);
    else await readPlain(file, chunk, reader, onProgress);
  } catch (error) {
    if (error instanceof BadLine) throw await badLineError(file, chunk, error);
    throw error;
  }
  return reader.stats;
}

async function readPlain(file: InputFile, chunk: Chunk, reader: LineReader, onProgress: ProgressHandler | undefined): Promise<void> {
  const rangeBytes = chunk.byteEnd - chunk.byteStart;
  if (rangeBytes > 0) {
    const stream = createReadStream(file.path, { start: chunk.byteStart, end: chunk.byteEnd - 1, highWaterMark: READ_BLOCK_BYTES });
    let bytesRead = 0;
    await forEachBlock(
      stream,
      (block) => {
        reader.push(block);
        bytesRead += block.length;
        reader.stats.bytesRead = bytesRead;
        return onProgress?.(bytesRead);
      },
      (cause) => ioError('read', file.path, cause),
    );
    if (bytesRead !== rangeBytes) {
      throw new QuernError('input', `${file.path} changed since it was planned: ${bytesRead} bytes of ${chunk.byteStart}..${chunk.byteEnd} could be read`);
    }
  }
  reader.finish();
}

/** A piece's bytes, handed on a read block at a time as a file's would be. */
async function readPiece(piece: ChunkPiece, reader: LineReader, onProgress: ProgressHandler | undefined): Promise<void> {
  const data = Buffer.from(piece.data.buffer, piece.data.byteOffset, piece.data.byteLength);
  for (let start = 0; start < data.length; start += READ_BLOCK_BYTES) {
    const block = data.subarray(start, Math.min(data.length, start + READ_BLOCK_BYTES));
    reader.push(block);
    reader.stats.bytesRead += block.length;
    const pending = onProgress?.(reader.stats.bytesRead);
    if (pending) await pending;
  }
  reader.finish();
}

/**
 * A gzip input read through, or (`range`, a range of its decompressed text without its bytes) only
 * the text of [range.byteStart, range.byteEnd): the stream is decompressed from its start, the text
 * before the range passed over, and reading stops at its end. That costs the decompression of all
 * the text before the range: the count's workers get a range's bytes from the pass that cut it, or
 * read its token file, and come here only without those (`--no-token-files`).
 */
async function readGzip(file: InputFile, reader: LineReader, onProgress: ProgressHandler | undefined, range?: Chunk): Promise<void> {
  const text = fileText(file);
  // Offset in the decompressed text of the next block.
  let offset = 0;
  let rangeRead = 0;
  try {
    await forEachBlock(
      text.blocks,
      (block) => {
        if (range !== undefined) {
          const start = Math.max(range.byteStart - offset, 0);
          const end = Math.min(range.byteEnd - offset, block.length);
          offset += block.length;
          if (start >= end) return;
          reader.push(block.subarray(start, end));
          rangeRead += end - start;
          reader.stats.bytesRead = rangeRead;
          return onProgress?.(rangeRead);
        }
        reader.push(block);
        reader.stats.bytesRead = text.bytesRead;
        return onProgress?.(text.bytesRead);
      },
      (cause) => {
        const at = reader.currentLine();
        return text.failure(cause, { lineInChunk: at.lineInChunk + (range?.linesBefore ?? 0), byteOffset: at.byteOffset });
      },
      range === undefined ? undefined : () => offset >= range.byteEnd,
    );
  } finally {
    await text.close();
  }
  if (range !== undefined) {
    if (rangeRead !== range.byteEnd - range.byteStart) {
      throw new QuernError('input', `${file.path} changed since it was planned: its decompressed text ends before bytes ${range.byteStart}..${range.byteEnd}`);
    }
    reader.finish();
    return;
  }
  reader.stats.bytesRead = text.bytesRead;
  text.checkEnd();
  reader.finish();
}

/**
 * Runs `onBlock` for each block of `stream` (until `done` says so). A failure of the stream itself
 * goes through `streamError`; whatever `onBlock` throws passes unchanged. The stream is closed either way.
 */
async function forEachBlock(
  stream: AsyncIterable<Buffer> | AsyncIterator<Buffer>,
  onBlock: (block: Buffer) => void | Promise<void>,
  streamError: (cause: unknown) => Error,
  done?: () => boolean,
): Promise<void> {
  const iterator = Symbol.asyncIterator in stream ? stream[Symbol.asyncIterator]() : stream;
  try {
    for (;;) {
      if (done?.()) return;
      let step: IteratorResult<Buffer>;
      try {
        step = await iterator.next();
      } catch (cause) {
        throw streamError(cause);
      }
      if (step.done) return;
      const pending = onBlock(step.value);
      if (pending) await pending;
    }
  } finally {
    // Closing an already failed or finished stream can only repeat its error; the first one counts.
    await iterator.return?.().catch(() => undefined);
  }
}

/** A bad line found while reading; turned into a QuernError with the absolute line number. */
class BadLine extends Error {
  constructor(readonly lineInChunk: number, readonly byteOffset: number, readonly reason: string) {
    super(reason);
  }
}

async function badLineError(file: InputFile, chunk: Chunk, bad: BadLine): Promise<QuernError> {
  const linesBefore = lineBaseOf(chunk) ?? await countNewlines(file.path, chunk.byteStart);
  const location: InputLocation = { file: file.path, line: linesBefore + bad.lineInChunk, byteOffset: bad.byteOffset };
  const where = `${ofStdin(file)}${file.gzip ? ' (byte offset in the decompressed stream)' : ''}`;
  return new QuernError('input', `${formatLocation(location)}${where}: ${bad.reason}`, { location });
}

/**
 * Turns a sequence of byte blocks into lines. Bytes after the last '\n' of a block are carried
 * (as views, not copies) until the block that ends their line; everything before is validated and
 * decoded in one piece. '\n' never occurs inside a multi-byte UTF-8 sequence, so cutting at it
 * keeps every sequence whole.
 */
class LineReader {
  readonly stats: ChunkReadStats = { bytesRead: 0, lines: 0, sentences: 0, emptyLines: 0, skipped: 0, skippedSamples: [] };
  /** Absolute offset (in the file, or the decompressed stream) of the next byte pushed. */
  private offset: number;
  private carry: Buffer[] = [];
  private carryBytes = 0;
  /** Absolute offset of the carried line's first byte. */
  private carryStart = 0;
  /** True while skipping the rest of an overlong line (skipBad only). */
  private discarding = false;
  /** Absolute line number of the line before the chunk, when known without reading (chunk at 0). */
  private readonly lineBase: number | undefined;

  constructor(
    byteStart: number,
    lineBase: number | undefined,
    private readonly skipBad: boolean,
    private readonly onSentence: SentenceHandler | undefined,
    private readonly readRecord: RecordReader | undefined,
    /** When set, whole lines go here as bytes instead of to `onSentence` as strings. */
    private readonly onLines?: LinesHandler,
  ) {
    this.offset = byteStart;
    this.lineBase = lineBase;
  }

  /** The line being read, for errors of the stream itself. */
  currentLine(): { lineInChunk: number; byteOffset: number } {
    const inLine = this.carryBytes > 0 || this.discarding;
    return { lineInChunk: this.stats.lines + 1, byteOffset: inLine ? this.carryStart : this.offset };
  }

  push(block: Buffer): void {
    const blockStart = this.offset;
    this.offset += block.length;
    const first = block.indexOf(0x0a);
    if (first < 0) {
      this.hold(block, 0, block.length, blockStart);
      return;
    }
    let position = 0;
    if (this.carryBytes > 0 || this.discarding) {
      this.completeCarried(block, first);
      position = first + 1;
    }
    const last = block.lastIndexOf(0x0a);
    if (last >= position) {
      this.lines(block, position, last + 1, blockStart);
      position = last + 1;
    }
    if (position < block.length) this.hold(block, position, block.length, blockStart);
  }

  /** Ends the input: a carried final line without '\n' is a line too. */
  finish(): void {
    if (this.discarding) {
      this.discarding = false;
      this.stats.lines++;
      return;
    }
    if (this.carryBytes === 0) return;
    const line = Buffer.concat(this.carry, this.carryBytes);
    this.carry = [];
    this.carryBytes = 0;
    if (isUtf8(line)) {
      this.valid(line, 0, line.length, this.carryStart);
    } else {
      this.stats.lines++;
      this.badLine('invalid UTF-8', this.carryStart);
    }
  }

  /** Keeps block[start, end), the beginning of a line that continues in a later block. */
  private hold(block: Buffer, start: number, end: number, blockStart: number): void {
    if (this.discarding) return;
    if (this.carryBytes === 0) this.carryStart = blockStart + start;
    if (this.carryBytes + (end - start) > LINE_BYTES_MAX) {
      this.overlong();
      return;
    }
    this.carry.push(block.subarray(start, end));
    this.carryBytes += end - start;
  }

  /** The carried line ends at block[newline]. */
  private completeCarried(block: Buffer, newline: number): void {
    if (!this.discarding && this.carryBytes + newline > LINE_BYTES_MAX) this.overlong();
    if (this.discarding) {
      this.discarding = false;
      this.stats.lines++;
      return;
    }
    this.carry.push(block.subarray(0, newline + 1));
    const line = Buffer.concat(this.carry, this.carryBytes + newline + 1);
    this.carry = [];
    this.carryBytes = 0;
    this.lines(line, 0, line.length, this.carryStart);
  }

  /** Drops the carried line, too long to hold; skips the rest of it (skipBad) or stops. */
  private overlong(): void {
    const byteOffset = this.carryStart;
    this.carry = [];
    this.carryBytes = 0;
    this.discarding = true;
    this.badLine(`line longer than ${LINE_BYTES_MAX} bytes`, byteOffset, this.stats.lines + 1);
  }

  /** block[start, end) holds complete lines, the last ending with '\n'. */
  private lines(block: Buffer, start: number, end: number, blockStart: number): void {
    if (isUtf8(block.subarray(start, end))) {
      this.valid(block, start, end, blockStart + start);
      return;
    }
    // Rare path: find the bad lines one by one.
    let position = start;
    while (position < end) {
      const lineEnd = block.indexOf(0x0a, position) + 1;
      assert(lineEnd > position && lineEnd <= end, 'every line of a complete-lines range ends with a newline');
      if (isUtf8(block.subarray(position, lineEnd))) {
        this.valid(block, position, lineEnd, blockStart + position);
      } else {
        this.stats.lines++;
        this.badLine('invalid UTF-8', blockStart + position);
      }
      position = lineEnd;
    }
  }

  /** block[start, end) is valid UTF-8 holding whole lines from absolute byte `byteStart`; only
   *  the last may lack '\n'. */
  private valid(block: Buffer, start: number, end: number, byteStart: number): void {
    if (this.onLines === undefined) {
      this.segment(block.toString('utf8', start, end), byteStart);
      return;
    }
    // The byte-order mark, as `segment` drops it.
    if (byteStart === 0 && end - start >= 3 && block[start] === 0xef && block[start + 1] === 0xbb && block[start + 2] === 0xbf) start += 3;
    const seen = this.onLines(block, start, end);
    this.stats.lines += seen.lines;
    this.stats.sentences += seen.lines - seen.blankLines;
    this.stats.emptyLines += seen.blankLines;
  }

  /** `text` holds whole lines starting at absolute byte `byteStart`; only the last may lack '\n'. */
  private segment(text: string, byteStart: number): void {
    const start = byteStart === 0 && text.charCodeAt(0) === 0xfeff ? 1 : 0; // byte-order mark
    if (this.readRecord === undefined) this.textLines(text, start);
    else this.jsonlLines(text, start, byteStart, this.readRecord);
  }

  private textLines(text: string, start: number): void {
    const onSentence = this.onSentence!;
    const length = text.length;
    let lines = 0;
    let sentences = 0;
    let emptyLines = 0;
    let position = start;
    try {
      while (position < length) {
        const newline = text.indexOf('\n', position);
        const next = newline < 0 ? length : newline + 1;
        let end = newline < 0 ? length : newline;
        if (end > position && text.charCodeAt(end - 1) === 0x0d) end--;
        lines++;
        const line = text.slice(position, end);
        if (isBlankLine(line)) {
          emptyLines++;
        } else {
          sentences++;
          onSentence(line, this.stats.lines + lines);
        }
        position = next;
      }
    } finally {
      this.stats.lines += lines;
      this.stats.sentences += sentences;
      this.stats.emptyLines += emptyLines;
    }
  }

  private jsonlLines(text: string, start: number, byteStart: number, readRecord: RecordReader): void {
    // Byte offsets are needed only for bad records: advance a cursor over the text on demand.
    let cursorText = 0;
    let cursorByte = byteStart;
    const length = text.length;
    let position = start;
    while (position < length) {
      const newline = text.indexOf('\n', position);
      const next = newline < 0 ? length : newline + 1;
      let end = newline < 0 ? length : newline;
      if (end > position && text.charCodeAt(end - 1) === 0x0d) end--;
      this.stats.lines++;
      const line = text.slice(position, end);
      if (isBlankLine(line)) {
        this.stats.emptyLines++;
      } else {
        const result = readRecord(line);
        if (typeof result === 'string') {
          forEachLine(result, this.fieldLine);
        } else {
          cursorByte += Buffer.byteLength(text.slice(cursorText, position), 'utf8');
          cursorText = position;
          this.badLine(result.reason, cursorByte);
        }
      }
      position = next;
    }
  }

  /** One line of a JSONL text field. */
  private readonly fieldLine = (line: string): void => {
    if (isBlankLine(line)) {
      this.stats.emptyLines++;
    } else {
      this.stats.sentences++;
      this.onSentence!(line, this.stats.lines);
    }
  };

  /** Stops at a bad line, or (skipBad) counts it and keeps a sample. */
  private badLine(reason: string, byteOffset: number, lineInChunk = this.stats.lines): void {
    if (!this.skipBad) throw new BadLine(lineInChunk, byteOffset, reason);
    this.stats.skipped++;
    if (this.stats.skippedSamples.length < SKIPPED_SAMPLES_PER_FILE_MAX) {
      const line = this.lineBase === undefined ? undefined : this.lineBase + lineInChunk;
      this.stats.skippedSamples.push({ line, lineInChunk, byteOffset, reason });
    }
  }
}
