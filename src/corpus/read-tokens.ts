/**
 * Reading a chunk as word-table entries: the input side of both corpus passes.
 *
 * Text split on white space goes through the byte tokenizer (byte-tokenizer.ts): with no
 * normalisation every line does; with lower-casing or NFC/NFKC the ASCII lines do (A–Z lower-cased
 * byte-wise: for ASCII text that is what normalising and String.prototype.toLowerCase give), and
 * the other lines go through the string tokenizer. 'chars' splitting and JSONL records take the
 * string path throughout. Either way the tokens are the ones `makeTokenizer` gives, and they reach
 * the caller as entries of one word table, a read block at a time.
 */
import { isAscii } from 'node:buffer';
import { assert } from '../errors.ts';
import { readChunk, readChunkLines, type ChunkReadStats, type LinesSeen } from './read.ts';
import { clearTokenBlock, lowerAscii, newTokenBlock, scanLines, SentenceTextAdder, type TokenBlock } from './byte-tokenizer.ts';
import { isBlankLine } from './lines.ts';
import { makeTokenizer } from './tokenize.ts';
import type { Chunk, InputFile, NormalizeOptions, ReadOptions } from './types.ts';
import type { WordLookup } from './word-table.ts';

/**
 * Receives the tokens read since the previous call (after each read block, and once at the end).
 * When it returns a promise, reading waits for it (the count pass spills there). The block is
 * reused afterwards: keep nothing of it.
 */
export type TokensHandler = (block: TokenBlock) => void | Promise<void>;

/** How lines reach the word table, given the normalisation. */
type Route = 'bytes' | 'ascii-bytes' | 'strings';

export class TokenReader {
  private readonly route: Route;
  private readonly lowercase: boolean;
  private readonly block = newTokenBlock();
  private readonly text: SentenceTextAdder;
  private lowered: Buffer = Buffer.allocUnsafe(1 << 16);
  private readonly seen: LinesSeen = { lines: 0, blankLines: 0 };

  /**
   * @param table the words; with `intern` new words are added to it (it must have `intern`),
   *   otherwise they read as −1
   */
  constructor(normalize: NormalizeOptions, private readonly table: WordLookup, private readonly intern: boolean) {
    assert(!intern || table.intern !== undefined, 'words are added to a table that can add them');
    this.text = new SentenceTextAdder(makeTokenizer(normalize));
    this.lowercase = normalize.lowercase;
    if (normalize.split !== 'space') this.route = 'strings';
    else if (normalize.unicode === 'none' && !normalize.lowercase) this.route = 'bytes';
    else this.route = 'ascii-bytes';
  }

  /**
   * Reads one chunk (readChunk's checks, errors and statistics) and hands its tokens to `onTokens`.
   * `onBytesRead` gets the input bytes consumed so far, after each block.
   */
  async read(
    file: InputFile,
    chunk: Chunk,
    options: ReadOptions,
    onTokens: TokensHandler,
    onBytesRead?: (bytesRead: number) => void,
  ): Promise<ChunkReadStats> {
    const block = this.block;
    clearTokenBlock(block);
    // Lines of the blocks handed on so far in this chunk.
    let linesHanded = 0;
    const flush = (): void | Promise<void> => {
      if (block.sentences === 0) return;
      linesHanded += block.lines;
      const pending = onTokens(block);
      if (pending) return pending.then(() => clearTokenBlock(block));
      clearTokenBlock(block);
    };
    const onProgress = (bytesRead: number): void | Promise<void> => {
      onBytesRead?.(bytesRead);
      return flush();
    };
    const stats = options.format === 'text' && this.route !== 'strings'
      ? await readChunkLines(file, chunk, options, (bytes, start, end) => this.lines(bytes, start, end), onProgress)
      : await readChunk(file, chunk, options, (sentence, lineInChunk) => {
        // Each sentence's line in the block (TokenBlock.sentenceLines) is its line in the chunk: the
        // lines readChunk passes over (blank ones; JSON Lines records without text) are counted
        // too, and the sentences of one record's text stand on its line.
        while (linesHanded + block.lines < lineInChunk - 1) SentenceTextAdder.blankLine(block);
        this.text.add(sentence, this.table, this.intern, block, linesHanded + block.lines === lineInChunk);
      }, onProgress);
    await flush();
    return stats;
  }

  private lines(bytes: Buffer, start: number, end: number): LinesSeen {
    const block = this.block;
    const lines = block.lines;
    const blankLines = block.blankLines;
    if (this.route === 'bytes') {
      scanLines(bytes, start, end, this.table, this.intern, block);
    } else if (isAscii(bytes.subarray(start, end))) {
      this.asciiLines(bytes, start, end);
    } else {
      for (let position = start; position < end;) {
        const newline = bytes.indexOf(0x0a, position);
        const next = newline < 0 || newline >= end ? end : newline + 1;
        if (isAscii(bytes.subarray(position, next))) this.asciiLines(bytes, position, next);
        else this.stringLine(bytes, position, next);
        position = next;
      }
    }
    this.seen.lines = block.lines - lines;
    this.seen.blankLines = block.blankLines - blankLines;
    return this.seen;
  }

  private asciiLines(bytes: Buffer, start: number, end: number): void {
    if (!this.lowercase) {
      scanLines(bytes, start, end, this.table, this.intern, this.block);
      return;
    }
    this.lowered = lowerAscii(bytes, start, end, this.lowered);
    scanLines(this.lowered, 0, end - start, this.table, this.intern, this.block);
  }

  /** One line through the string tokenizer, cut as the reader cuts lines for `readChunk`. */
  private stringLine(bytes: Buffer, start: number, end: number): void {
    if (end > start && bytes[end - 1] === 0x0a) end--;
    if (end > start && bytes[end - 1] === 0x0d) end--;
    const line = bytes.toString('utf8', start, end);
    if (isBlankLine(line)) SentenceTextAdder.blankLine(this.block);
    else this.text.add(line, this.table, this.intern, this.block);
  }
}
