/**
 * The text of one input cut into pieces for many threads, as it is read from its start (a
 * TextStream): a gzip file, whose deflate stream cannot be entered in the middle, or standard
 * input, which can be read only once. One thread reads and cuts the text where a plain file of the
 * same text would be cut into chunks (src/corpus/plan.ts: just after the first '\n' at or after each
 * `pieceBytes`), and other threads read the pieces (readChunk with a ChunkPiece). Only the search
 * for newlines runs here; validation, decoding and tokenising stay with the readers.
 */
import { assert } from '../errors.ts';
import { LINE_BYTES_MAX } from '../limits.ts';
import { fileText, type TextStream } from './text-stream.ts';
import type { Chunk, ChunkPiece, InputFile } from './types.ts';

/** A piece's bytes when only its range is wanted (`nextRange`). */
const NO_BYTES = Buffer.alloc(0);

/**
 * The pieces of a text stream, in order, as `next` is called: each holds whole lines of the text,
 * is at least `pieceBytes` long except the last, and ends just after the first '\n' at or after its
 * `pieceBytes`-th byte. A text that is empty is one empty piece.
 *
 * A line longer than LINE_BYTES_MAX is not held whole: its piece ends inside it, past the limit (so
 * the reader of that piece rejects it, or skips it with --skip-bad, as it would in a whole file),
 * and the rest of the line is dropped here; the next piece starts after it, its lines numbered on.
 *
 * Bad gzip data, an input that cannot be read, and a file whose size changed since it was
 * discovered, fail `next` with the errors `readChunk` gives (the line and decompressed byte offset
 * where the data broke off), after every piece before that point has been handed out.
 */
export class TextPieces {
  /** Bytes of the text not yet handed out, from `pieceStart`. */
  private pending: Buffer[] = [];
  private pendingBytes = 0;
  /** Absolute offset, in the text, of `pending`'s first byte. */
  private pieceStart = 0;
  /** Newlines before `pieceStart` (the lines before the next piece). */
  private linesBefore = 0;
  /** Input bytes (compressed ones for gzip) accounted to the pieces handed out so far. */
  private sourceAccounted = 0;
  /** Skipping the rest of an overlong line, which ended the last piece; where that line starts. */
  private dropping = false;
  private droppedLineStart = 0;
  private ended = false;
  private closed = false;
  /** Whether the piece being cut keeps its bytes (`next`) or only its range (`nextRange`). */
  private keepBytes = true;
  private handedOut = 0;

  /**
   * @param firstIndex the `index` of the first piece (the next ones count on)
   * @param lineBytesMax the longest line held whole (LINE_BYTES_MAX; smaller in tests)
   */
  constructor(
    private readonly text: TextStream,
    private readonly fileIndex: number,
    private readonly pieceBytes: number,
    private nextIndex: number,
    private readonly lineBytesMax = LINE_BYTES_MAX,
  ) {
    assert(Number.isSafeInteger(pieceBytes) && pieceBytes >= 1, `piece size ${pieceBytes} is a positive integer`);
  }

  /** The pieces of the gzip file `file` (the input `fileIndex`), read from its start. */
  static ofFile(file: InputFile, fileIndex: number, pieceBytes: number, firstIndex: number, lineBytesMax = LINE_BYTES_MAX): TextPieces {
    assert(file.gzip, `${file.path} is cut into pieces only when it is gzip`);
    return new TextPieces(fileText(file), fileIndex, pieceBytes, firstIndex, lineBytesMax);
  }

  /** The next piece, or undefined after the last (or once closed). */
  async next(): Promise<ChunkPiece | undefined> {
    this.keepBytes = true;
    return this.advance();
  }

  /** The next piece's range only (its bytes dropped, not copied), for a plan: `next` without `data`
   *  and `sourceBytes`. */
  async nextRange(): Promise<Chunk | undefined> {
    this.keepBytes = false;
    const piece = await this.advance();
    return piece === undefined ? undefined : { index: piece.index, fileIndex: piece.fileIndex, byteStart: piece.byteStart, byteEnd: piece.byteEnd, linesBefore: piece.linesBefore };
  }

  private async advance(): Promise<ChunkPiece | undefined> {
    for (;;) {
      if (this.closed) return undefined;
      const piece = this.cut();
      if (piece !== undefined) return piece;
      if (this.ended) return this.last();
      let step: IteratorResult<Buffer>;
      try {
        step = await this.text.blocks.next();
      } catch (cause) {
        // Closed while waiting for data (the caller gave up): nothing to report.
        if (this.closed) return undefined;
        await this.close();
        throw this.text.failure(cause, this.currentLine());
      }
      if (this.closed) return undefined;
      if (step.done) {
        this.ended = true;
        this.text.checkEnd();
      } else this.add(step.value);
    }
  }

  /** Stops reading (after the last piece, or when the caller gives up). */
  async close(): Promise<void> {
    this.closed = true;
    this.ended = true;
    await this.text.close();
  }

  /** Where the text broke off, as LineReader.currentLine gives it for a whole gzip file. */
  private currentLine(): { lineInChunk: number; byteOffset: number } {
    if (this.dropping) return { lineInChunk: this.linesBefore + 1, byteOffset: this.droppedLineStart };
    let lines = this.linesBefore;
    let lineStart = this.pieceStart;
    let offset = this.pieceStart;
    for (const block of this.pending) {
      for (let at = block.indexOf(0x0a); at >= 0; at = block.indexOf(0x0a, at + 1)) {
        lines++;
        lineStart = offset + at + 1;
      }
      offset += block.length;
    }
    return { lineInChunk: lines + 1, byteOffset: lineStart };
  }

  private add(block: Buffer): void {
    if (this.dropping) {
      const newline = block.indexOf(0x0a);
      if (newline < 0) {
        this.pieceStart += block.length;
        return;
      }
      // The overlong line ends here: it was one line, and the next piece starts after it.
      this.dropping = false;
      this.linesBefore++;
      this.pieceStart += newline + 1;
      block = block.subarray(newline + 1);
      if (block.length === 0) return;
    }
    this.pending.push(block);
    this.pendingBytes += block.length;
  }

  /** A piece, when the pending bytes hold one, else undefined. */
  private cut(): ChunkPiece | undefined {
    if (this.pendingBytes < this.pieceBytes) return undefined;
    // The first '\n' at or after the piece's pieceBytes-th byte (relative offset pieceBytes − 1).
    let offset = 0;
    for (const block of this.pending) {
      const from = Math.max(0, this.pieceBytes - 1 - offset);
      if (from < block.length) {
        const newline = block.indexOf(0x0a, from);
        // A piece that takes every pending byte waits for the end of the stream, if it is near:
        // then it is known to be the last, and accounts for the rest of the compressed file.
        if (newline >= 0) return offset + newline + 1 === this.pendingBytes && !this.ended ? undefined : this.handOut(offset + newline + 1, false);
      }
      offset += block.length;
    }
    // No line ends past the target yet: wait for more, unless the line there is already too long.
    const lineStart = this.lastLineStart();
    if (this.pendingBytes - lineStart > this.lineBytesMax) {
      this.droppedLineStart = this.pieceStart + lineStart;
      return this.handOut(this.pendingBytes, true);
    }
    return undefined;
  }

  /** Relative offset where the pending bytes' last (unfinished) line starts. */
  private lastLineStart(): number {
    let offset = this.pendingBytes;
    for (let i = this.pending.length - 1; i >= 0; i--) {
      const block = this.pending[i];
      offset -= block.length;
      const newline = block.lastIndexOf(0x0a);
      if (newline >= 0) return offset + newline + 1;
    }
    return 0;
  }

  /** The piece at the end of the stream: what is left, or one empty piece for an empty stream. */
  private last(): ChunkPiece | undefined {
    if (this.pendingBytes > 0 || this.handedOut === 0) return this.handOut(this.pendingBytes, false);
    return undefined;
  }

  /** Hands out the first `bytes` pending bytes; `overlong`: they end inside an overlong line. */
  private handOut(bytes: number, overlong: boolean): ChunkPiece {
    const data = this.keepBytes ? Buffer.allocUnsafeSlow(bytes) : NO_BYTES;
    let filled = 0;
    let newlines = 0;
    while (filled < bytes) {
      const block = this.pending[0];
      const take = Math.min(block.length, bytes - filled);
      const part = block.subarray(0, take);
      if (this.keepBytes) part.copy(data, filled);
      for (let at = part.indexOf(0x0a); at >= 0; at = part.indexOf(0x0a, at + 1)) newlines++;
      filled += take;
      if (take === block.length) this.pending.shift();
      else this.pending[0] = block.subarray(take);
    }
    this.pendingBytes -= bytes;
    const isLast = this.ended && this.pendingBytes === 0;
    // The last piece accounts for the rest of the input (the gzip trailer); none for more than its size.
    const { bytesRead, bytesExpected } = this.text;
    const sourceBytes = (isLast ? bytesExpected ?? bytesRead : Math.min(bytesExpected ?? bytesRead, bytesRead)) - this.sourceAccounted;
    this.sourceAccounted += sourceBytes;
    const piece: ChunkPiece = {
      index: this.nextIndex++, fileIndex: this.fileIndex, byteStart: this.pieceStart, byteEnd: this.pieceStart + bytes,
      data, linesBefore: this.linesBefore, sourceBytes,
    };
    this.handedOut++;
    this.pieceStart += bytes;
    this.linesBefore += newlines;
    if (overlong) {
      // The rest of the line is dropped, up to its '\n' (`add`), as the reader skips it.
      assert(this.pendingBytes === 0, 'a piece that ends inside an overlong line takes every pending byte');
      this.dropping = true;
    }
    return piece;
  }
}
