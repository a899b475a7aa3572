/**
 * Tokenizing straight from UTF-8 bytes into word-table entries: the fast path of both corpus
 * passes for text split on white space. A token is a maximal run of bytes that are not white
 * space, where white space is exactly the tokenizer's set (JS `\s`, `isSpaceCode` in tokenize.ts):
 * the ASCII ones and U+00A0, U+1680, U+2000–U+200A, U+2028, U+2029, U+202F, U+205F, U+3000,
 * U+FEFF, recognised by their byte sequences. No string is made per token: each token is hashed
 * while its end is sought and looked up in the word table by its bytes; a `WordTable` takes them
 * 256 at a time, so that its cache misses overlap (`WordTable.lookupBatch`: tokenizing and
 * interning in 0.54–0.77× the time of one lookup per token in two runs of `npm run bench:kernels
 * -- --against 878c82d --only scan`). A `WordTable` in a WebAssembly memory (the default where one
 * can be had) is scanned into there instead, the same loop in word-scan.as.ts (`scanInWasm`); the
 * loop below is its JavaScript twin, and the one for any other `WordLookup`.
 *
 * The result of a block of lines is a `TokenBlock`: the tokens' entries in order and where each
 * sentence (non-blank line) ends. Lines that need what only strings offer (Unicode normalisation,
 * non-ASCII lower-casing, grapheme splitting) go through `addSentenceText` with the string
 * tokenizer instead, into the same block.
 */
import { assert } from '../errors.ts';
import { UNKNOWN_TOKEN, type Tokenizer } from './tokenize.ts';
import { byteClasses } from './byte-class.ts';
import { WORD_SCAN_PIECE_BYTES } from '../limits.ts';
import { FNV_OFFSET, FNV_PRIME, hashBytes, type WordLookup, WordTable } from './word-table.ts';


/** Tokens of a run of lines, as word-table entries. */
export interface TokenBlock {
  /** entries[0 .. tokens): the entry of each token in input order; −1 for a word the table does
   *  not hold (lookup mode only). */
  entries: Int32Array;
  tokens: number;
  /** sentenceEnds[0 .. sentences): sentence i is entries[sentenceEnds[i−1] (0 for i = 0) ..
   *  sentenceEnds[i]). A sentence may have no tokens when a normalisation removed them all. */
  sentenceEnds: Uint32Array;
  /** sentenceLines[i]: the line sentence i is on, counted from 1 at the block's first line. */
  sentenceLines: Uint32Array;
  sentences: number;
  /** Lines seen, blank ones included (JSON Lines: records; the sentences of a record's text are
   *  all on its line). */
  lines: number;
  /** Lines that were empty or held only white space (not sentences). */
  blankLines: number;
}

export function newTokenBlock(): TokenBlock {
  return { entries: new Int32Array(1 << 16), tokens: 0, sentenceEnds: new Uint32Array(1 << 12), sentenceLines: new Uint32Array(1 << 12), sentences: 0, lines: 0, blankLines: 0 };
}

/** Empties a block, keeping its arrays. */
export function clearTokenBlock(block: TokenBlock): void {
  block.tokens = 0;
  block.sentences = 0;
  block.lines = 0;
  block.blankLines = 0;
}

function growEntries(block: TokenBlock, room = 1): Int32Array {
  let length = 2 * block.entries.length;
  while (length < block.tokens + room) length *= 2;
  const entries = new Int32Array(length);
  entries.set(block.entries.subarray(0, block.tokens));
  block.entries = entries;
  return entries;
}

/** Room in the sentence arrays for `room` sentences more. */
function growSentences(block: TokenBlock, room: number): void {
  let length = 2 * block.sentenceEnds.length;
  while (length < block.sentences + room) length *= 2;
  const ends = new Uint32Array(length);
  ends.set(block.sentenceEnds.subarray(0, block.sentences));
  block.sentenceEnds = ends;
  const lines = new Uint32Array(length);
  lines.set(block.sentenceLines.subarray(0, block.sentences));
  block.sentenceLines = lines;
}

/** Counts one line (not with `sameLine`: another sentence of the line before, as the lines of a
 *  JSON Lines record's text); a line with tokens since the last sentence end is a sentence. */
function endLine(block: TokenBlock, blank: boolean, sameLine = false): void {
  if (!sameLine) block.lines++;
  if (blank) {
    block.blankLines++;
    return;
  }
  if (block.sentences === block.sentenceEnds.length) growSentences(block, 1);
  block.sentenceLines[block.sentences] = block.lines;
  block.sentenceEnds[block.sentences++] = block.tokens;
}

// Byte classes for the scanner, as byteClasses() numbers them. Constants and table of this module,
// not imports: V8 does not fold imported ones into the loop (with them the scan took 2.3× as long).
const WORD = 0;
const SPACE = 1;
const NEWLINE = 2;
/** Lead byte of a multi-byte white-space character (C2, E1, E2, E3, EF), or of another character. */
const MAYBE_SPACE = 3;
const BYTE_CLASS = byteClasses();
assert(BYTE_CLASS[0x61] === WORD && BYTE_CLASS[0x20] === SPACE && BYTE_CLASS[0x0a] === NEWLINE && BYTE_CLASS[0xe2] === MAYBE_SPACE, 'the byte classes are numbered as byteClasses() numbers them');

/**
 * Width in bytes of the multi-byte white-space character starting at bytes[p], or 0 when the
 * character there is not white space. bytes[p .. end) must be valid UTF-8.
 */
export function multiByteSpaceWidth(bytes: Uint8Array, p: number, end: number): number {
  const b0 = bytes[p];
  if (b0 === 0xc2) return p + 1 < end && bytes[p + 1] === 0xa0 ? 2 : 0; // U+00A0
  if (p + 2 >= end) return 0;
  const b1 = bytes[p + 1];
  const b2 = bytes[p + 2];
  switch (b0) {
    case 0xe1: // U+1680
      return b1 === 0x9a && b2 === 0x80 ? 3 : 0;
    case 0xe2: // U+2000–U+200A, U+2028, U+2029, U+202F (E2 80 xx); U+205F (E2 81 9F)
      if (b1 === 0x80) return b2 <= 0x8a || b2 === 0xa8 || b2 === 0xa9 || b2 === 0xaf ? 3 : 0;
      return b1 === 0x81 && b2 === 0x9f ? 3 : 0;
    case 0xe3: // U+3000
      return b1 === 0x80 && b2 === 0x80 ? 3 : 0;
    case 0xef: // U+FEFF
      return b1 === 0xbb && b2 === 0xbf ? 3 : 0;
    default:
      return 0;
  }
}

/**
 * Splits bytes[start, end) — valid UTF-8 holding whole lines, each ending with '\n' except perhaps
 * the last — on white space and appends the tokens' entries and the sentence ends to `out`. With
 * `intern`, new words are added to `table`; otherwise they get entry −1. Text is taken as it is:
 * no normalisation, no lower-casing (the caller lower-cases ASCII bytes beforehand), and the
 * sentence markers are left to the table (the passes keep entries for `<s>`, `</s>`, `<unk>`).
 */
export function scanLines(bytes: Uint8Array, start: number, end: number, table: WordLookup, intern: boolean, out: TokenBlock): void {
  if (table instanceof WordTable && table.inWasm) scanInWasm(bytes, start, end, table, intern, out);
  else scanInJs(bytes, start, end, table, intern, out);
}

/**
 * scanLines in WebAssembly (WordTable.scanPiece): the range goes into the table's memory in pieces
 * of whole lines, WORD_SCAN_PIECE_BYTES at most (or one longer line), so a piece scans as the whole
 * range would (no token or multi-byte character spans a '\n'); each piece's outputs are appended to
 * `out`. When the table leaves its memory (one it outgrew could not be replaced), the rest of the
 * range, from the piece it happened in, is scanned in JavaScript.
 */
function scanInWasm(bytes: Uint8Array, start: number, end: number, table: WordTable, intern: boolean, out: TokenBlock): void {
  for (let p = start; p < end;) {
    let pieceEnd = end;
    if (end - p > WORD_SCAN_PIECE_BYTES) {
      const cut = bytes.lastIndexOf(0x0a, p + WORD_SCAN_PIECE_BYTES - 1);
      if (cut >= p) {
        pieceEnd = cut + 1;
      } else {
        const next = bytes.indexOf(0x0a, p + WORD_SCAN_PIECE_BYTES);
        if (next >= 0 && next < end) pieceEnd = next + 1;
      }
    }
    const memory = table.scanPiece(bytes, p, pieceEnd, intern, out.tokens, out.lines);
    if (memory === null) {
      scanInJs(bytes, p, end, table, intern, out);
      return;
    }
    const tokens = memory.tokens;
    if (out.tokens + tokens > out.entries.length) growEntries(out, tokens);
    out.entries.set(memory.entries.subarray(0, tokens), out.tokens);
    out.tokens += tokens;
    const sentences = memory.sentences;
    if (out.sentences + sentences > out.sentenceEnds.length) growSentences(out, sentences);
    out.sentenceEnds.set(memory.sentenceEnds.subarray(0, sentences), out.sentences);
    out.sentenceLines.set(memory.sentenceLines.subarray(0, sentences), out.sentences);
    out.sentences += sentences;
    out.lines += memory.lines;
    out.blankLines += memory.blankLines;
    p = pieceEnd;
  }
}

/** scanLines in JavaScript: any WordLookup. */
function scanInJs(bytes: Uint8Array, start: number, end: number, table: WordLookup, intern: boolean, out: TokenBlock): void {
  let entries = out.entries;
  let tokens = out.tokens;
  let lineStart = tokens;
  // A table with `lookupBatch` gets the tokens a batch at a time: their entries are filled in when
  // the batch is full, before the entries array grows, and at the end. Any other lookup (a model
  // file's vocabulary, small enough to stay in the caches) answers each token as it is found, with
  // nothing held back for a batch.
  const batched = table.lookupBatch !== undefined;
  const batch = scanBatch;
  let pending = 0;
  let p = start;
  while (p < end) {
    const c = BYTE_CLASS[bytes[p]];
    if (c === SPACE) {
      p++;
      continue;
    }
    if (c === NEWLINE) {
      out.tokens = tokens;
      endLine(out, tokens === lineStart);
      lineStart = tokens;
      p++;
      continue;
    }
    if (c === MAYBE_SPACE) {
      const width = multiByteSpaceWidth(bytes, p, end);
      if (width !== 0) {
        p += width;
        continue;
      }
    }
    // A token starts at p: hash it while seeking its end.
    const tokenStart = p;
    let h = FNV_OFFSET;
    for (;;) {
      h = Math.imul(h ^ bytes[p], FNV_PRIME);
      if (++p === end) break;
      const next = BYTE_CLASS[bytes[p]];
      if (next === WORD) continue;
      if (next !== MAYBE_SPACE || multiByteSpaceWidth(bytes, p, end) !== 0) break;
    }
    if (tokens === entries.length) {
      lookUp(bytes, table, intern, batch, pending, entries, tokens - pending);
      pending = 0;
      out.tokens = tokens;
      entries = growEntries(out);
    }
    if (!batched) {
      entries[tokens++] = intern ? table.intern!(bytes, tokenStart, p, h) : table.find(bytes, tokenStart, p, h);
      continue;
    }
    batch.starts[pending] = tokenStart;
    batch.ends[pending] = p;
    batch.hashes[pending] = h;
    tokens++;
    if (++pending === SCAN_BATCH_TOKENS) {
      lookUp(bytes, table, intern, batch, pending, entries, tokens - pending);
      pending = 0;
    }
  }
  lookUp(bytes, table, intern, batch, pending, entries, tokens - pending);
  out.tokens = tokens;
  if (end > start && bytes[end - 1] !== 0x0a) endLine(out, tokens === lineStart);
}

/** Tokens `scanLines` looks up together: enough independent cache misses to overlap, few enough
 *  that the batch's arrays stay in the first-level cache (3 × 4 bytes a token). */
const SCAN_BATCH_TOKENS = 256;

/** The token batch of `scanLines` (one per thread: scanLines does not nest). */
const scanBatch = { starts: new Int32Array(SCAN_BATCH_TOKENS), ends: new Int32Array(SCAN_BATCH_TOKENS), hashes: new Int32Array(SCAN_BATCH_TOKENS) };

/** The entries of the batch's first `count` tokens into entries[at ..] (a table with lookupBatch). */
function lookUp(bytes: Uint8Array, table: WordLookup, intern: boolean, batch: typeof scanBatch, count: number, entries: Int32Array, at: number): void {
  if (count > 0) table.lookupBatch!(bytes, batch.starts, batch.ends, batch.hashes, count, intern, entries, at);
}

/**
 * Copies bytes[start, end) into `target` (at 0) with A–Z lower-cased: String.prototype.toLowerCase
 * of ASCII text. Returns `target`, or a larger buffer when it was too small.
 */
export function lowerAscii(bytes: Buffer, start: number, end: number, target: Buffer): Buffer {
  if (target.length < end - start) target = Buffer.allocUnsafe(Math.max(end - start, 2 * target.length));
  // Three native passes beat a JS loop over the bytes.
  target.write(bytes.toString('latin1', start, end).toLowerCase(), 0, 'latin1');
  return target;
}

/**
 * Appends one sentence given as text (a non-blank line, raw) through the string tokenizer: for
 * lines the byte scanner cannot take (normalisation, non-ASCII lower-casing, 'chars' splitting)
 * and for JSONL text fields. Each token is encoded to UTF-8 and looked up like a scanned one.
 */
export class SentenceTextAdder {
  private readonly strings: string[] = [];
  private scratch = Buffer.allocUnsafe(1 << 12);

  constructor(private readonly tokenize: Tokenizer) {}

  /** Adds `text` as a sentence, on a line of its own or, with `sameLine`, on the line of the one
   *  before (JSON Lines: a record's text holds several). */
  add(text: string, table: WordLookup, intern: boolean, out: TokenBlock, sameLine = false): void {
    const strings = this.strings;
    const count = this.tokenize(text, strings);
    for (let i = 0; i < count; i++) {
      const token = strings[i];
      if (this.scratch.length < 3 * token.length) this.scratch = Buffer.allocUnsafe(Math.max(3 * token.length, 2 * this.scratch.length));
      const length = this.scratch.write(token, 0, 'utf8');
      const h = hashBytes(this.scratch, 0, length);
      if (out.tokens === out.entries.length) growEntries(out);
      out.entries[out.tokens++] = intern ? table.intern!(this.scratch, 0, length, h) : table.find(this.scratch, 0, length, h);
    }
    endLine(out, false, sameLine);
  }

  /** Counts a blank line (one the reader or the caller found to hold only white space). */
  static blankLine(out: TokenBlock): void {
    endLine(out, true);
  }
}

/** The words every pass keeps a table entry for, so that text can never forge them: entries 0..2
 *  of a fresh table, each counted as `<unk>` (tokenize.ts: the sentence markers are reserved). */
export const RESERVED_WORDS: readonly string[] = ['<s>', '</s>', UNKNOWN_TOKEN];

/** A word table holding the reserved words as entries 0..2. */
export function reserveWords(table: WordTable): void {
  assert(table.size === 0, 'reserved words go first into an empty table');
  for (const word of RESERVED_WORDS) table.internWord(word);
}
