/**
 * scanLines into a WordTable in WebAssembly (word-scan.as.ts, word-memory.ts, WordTable.scanPiece)
 * against its JavaScript twin (engine 'js'): the committed module is what its source compiles to,
 * and both give the same entries, sentence ends and lines, line and blank-line counts, and the same
 * table — size, bytes, every word by entry, every word found again by the JavaScript lookup (so the
 * two hash and place words alike) — on the same calls.
 */
import { afterEach, describe, expect, test } from 'vitest';
import { newTokenBlock, reserveWords, scanLines, type TokenBlock } from '../../src/corpus/byte-tokenizer.ts';
import { isSpaceCode } from '../../src/corpus/tokenize.ts';
import { WordMemory } from '../../src/corpus/word-memory.ts';
import { hashBytes, WordTable } from '../../src/corpus/word-table.ts';
import { WORD_SCAN_PIECE_BYTES } from '../../src/limits.ts';
import { expectCommittedWasm } from '../support/committed-wasm.ts';
import { seededRandom } from '../support/seeded.ts';

test('the committed word-scan.wasm is what asc (the pinned AssemblyScript) compiles from word-scan.as.ts', () => {
  expectCommittedWasm('src/corpus/word-scan.as.ts', 'src/corpus/asconfig.json', 'src/corpus/word-scan.wasm');
});

/** One scanLines call: bytes[start, end) of `text`, looked up (intern or not). */
interface Call {
  bytes: Buffer;
  start: number;
  end: number;
  intern: boolean;
}

const whole = (text: string | Buffer, intern = true): Call => {
  const bytes = typeof text === 'string' ? Buffer.from(text, 'utf8') : text;
  return { bytes, start: 0, end: bytes.length, intern };
};

/** `text` inside other bytes (ones that would be tokens, or spaces, if they were read). */
const inside = (text: string, intern = true): Call => {
  const core = Buffer.from(text, 'utf8');
  const bytes = Buffer.concat([Buffer.from('pre fix\u3000ab'), core, Buffer.from('cd e\n')]);
  return { bytes, start: bytes.length - core.length - 5, end: bytes.length - 5, intern };
};

function freshTable(engine: 'auto' | 'js', slots?: number): WordTable {
  const table = new WordTable(slots, engine);
  if (engine === 'auto') expect(table.inWasm, 'a WebAssembly memory can be had here').toBe(true);
  reserveWords(table);
  return table;
}

/** Runs the calls into one block and one table per engine (interleaved with `between` on the
 *  table, e.g. words interned by the JavaScript methods) and expects the same results. */
function expectSameScans(
  calls: Call[],
  options: { slots?: number; between?: (table: WordTable, call: number) => void; storedByHash?: (entry: number) => boolean } = {},
): { block: TokenBlock; table: WordTable } {
  const results = (['js', 'auto'] as const).map((engine) => {
    const table = freshTable(engine, options.slots);
    const block = newTokenBlock();
    calls.forEach((call, i) => {
      scanLines(call.bytes, call.start, call.end, table, call.intern, block);
      options.between?.(table, i);
    });
    return { block, table };
  });
  const [js, wasm] = results;
  expectSameBlocks(wasm.block, js.block);
  expectSameTables(wasm.table, js.table, options.storedByHash);
  return wasm;
}

function expectSameBlocks(actual: TokenBlock, expected: TokenBlock): void {
  expect([actual.tokens, actual.sentences, actual.lines, actual.blankLines]).toEqual([expected.tokens, expected.sentences, expected.lines, expected.blankLines]);
  expect(Buffer.from(actual.entries.buffer, 0, 4 * actual.tokens).equals(Buffer.from(expected.entries.buffer, 0, 4 * expected.tokens)), 'entries').toBe(true);
  expect(Array.from(actual.sentenceEnds.subarray(0, actual.sentences))).toEqual(Array.from(expected.sentenceEnds.subarray(0, expected.sentences)));
  expect(Array.from(actual.sentenceLines.subarray(0, actual.sentences))).toEqual(Array.from(expected.sentenceLines.subarray(0, expected.sentences)));
}

/** …, every word found again by its bytes and hash (`storedByHash`: the words stored under their
 *  own FNV-1a hash, all by default). */
function expectSameTables(actual: WordTable, expected: WordTable, storedByHash: (entry: number) => boolean = () => true): void {
  expect(actual.size).toBe(expected.size);
  expect(actual.bytes).toBe(expected.bytes);
  for (let entry = 0; entry < expected.size; entry++) {
    const bytes = actual.wordBytes(entry);
    if (!Buffer.from(bytes).equals(Buffer.from(expected.wordBytes(entry)))) throw new Error(`entry ${entry}: ${actual.word(entry)} against ${expected.word(entry)}`);
    const copy = Buffer.from(bytes);
    if (storedByHash(entry) && actual.find(copy, 0, copy.length, hashBytes(copy, 0, copy.length)) !== entry) throw new Error(`entry ${entry} (${actual.word(entry)}) is not found again`);
  }
}

/** Every white-space character the tokenizer knows but '\n', and characters whose bytes begin like
 *  theirs: U+200B (E2 80 8B), U+00A1 (C2 A1), U+205E, U+3001, U+FEFE, U+1681 … */
const SPACES = [...Array(0x3001).keys(), 0xfeff].filter((c) => isSpaceCode(c) && c !== 0x0a).map((c) => String.fromCharCode(c));
const NEAR_MISSES = ['\u00a1', '\u00c2', '\u0100', '\u1681', '\u167f', '\u1a80', '\u200b', '\u200c', '\u200f', '\u2027', '\u202a', '\u202d', '\u202e', '\u2030',
  '\u205e', '\u2060', '\u2040', '\u3001', '\u2fff', '\u3100', '\ufefe', '\ufefd', '\ufbff', '\uff00', '\u0085', '\u001c', '\u001f', '\u0000', '\u007f', '\u0e00'];
const WORDS = ['a', 'harbour', 'é', '港', '𠮷', 'ΑΣ', 'x\u0301', '<s>', '</s>', '<unk>', '<S>', 'ǅ', '🇯🇵', 'naïve', 'квай'];

function randomText(random: () => number, lines: number): string {
  const pick = <T>(list: readonly T[]): T => list[Math.floor(random() * list.length)];
  let text = '';
  for (let l = 0; l < lines; l++) {
    const parts = Math.floor(random() * 10);
    for (let p = 0; p < parts; p++) {
      const r = random();
      text += r < 0.35 ? pick(SPACES) : r < 0.55 ? pick(NEAR_MISSES) : pick(WORDS);
    }
    text += random() < 0.15 ? '\r\n' : '\n';
  }
  return text;
}

/** Lines of Zipf-like words (`w` + a number, some with non-ASCII letters), tab or space apart. */
function zipfText(random: () => number, tokens: number, vocabulary: number): string {
  const lines: string[] = [];
  for (let t = 0; t < tokens;) {
    const length = 1 + Math.floor(random() * 30);
    const words: string[] = [];
    for (let i = 0; i < length; i++) words.push(`w${Math.floor(random() ** 3 * vocabulary)}${random() < 0.02 ? 'é港' : ''}`);
    lines.push(words.join(random() < 0.8 ? ' ' : '\t'));
    t += length;
  }
  return lines.join('\n') + '\n';
}

describe('scanLines in WebAssembly and in JavaScript', () => {
  test('random text with a Zipf-like vocabulary, in several calls, then looked up', () => {
    const random = seededRandom(31);
    const texts = [0, 1, 2].map(() => zipfText(random, 60_000, 30_000));
    const calls = [...texts.map((text) => whole(text)), whole(zipfText(random, 20_000, 60_000), false)];
    const { block, table } = expectSameScans(calls);
    expect(block.tokens).toBeGreaterThan(200_000);
    expect(table.size).toBeGreaterThan(10_000);
    expect(block.entries.subarray(0, block.tokens).includes(-1)).toBe(true);
  });

  test('every multi-byte white-space character and its near misses, between words and at the ends of ranges', () => {
    const random = seededRandom(7);
    const calls: Call[] = [];
    for (let round = 0; round < 60; round++) calls.push(whole(randomText(random, 40)));
    // Each character alone, after a word, at the very end of a range with and without '\n', and cut
    // short by the range's end (its first bytes a token's last).
    for (const c of [...SPACES, ...NEAR_MISSES]) {
      calls.push(whole(`x${c}y\n${c}\n${c}${c}z`), whole(`a${c}`), whole(c), inside(`b${c}`), inside(`${c}c\n${c}`));
      const bytes = Buffer.from(`q${c}`, 'utf8');
      for (let cut = 1; cut < bytes.length; cut++) calls.push({ bytes, start: 0, end: cut, intern: true });
    }
    expectSameScans(calls);
  });

  test('CRLF, lines without a final newline, empty and blank lines, empty ranges', () => {
    const calls = ['one two\r\nthree\r\n', '\r\n', 'last line', '', '\n\n\n', ' \t\u3000\n\u00a0', 'a\n\nb', '\r', 'x\r', '\n', ' ', 'tail\r\n\r\n  \r\nend']
      .flatMap((text) => [whole(text), inside(text), whole(text, false)]);
    const { block } = expectSameScans(calls);
    expect(block.blankLines).toBeGreaterThan(10);
  });

  test('tokens longer than 64 KiB, and lines longer than a piece, in ranges of many pieces', () => {
    const random = seededRandom(3);
    const long = (bytes: number, letter: string): string => letter.repeat(bytes);
    const zipf = zipfText(random, 150_000, 20_000);
    expect(zipf.length).toBeGreaterThan(2 * WORD_SCAN_PIECE_BYTES);
    const calls = [
      whole(`${long(70_000, 'a')} b ${long(70_000, 'a')}\n${long(65_537, '港')}\n`),
      // A line of one token longer than a piece, then one of many tokens; a range of many pieces
      // after a block that holds tokens already; the same long token found again.
      whole(`${zipf}${long(WORD_SCAN_PIECE_BYTES + 3, 'x')}\n${'w1 '.repeat(WORD_SCAN_PIECE_BYTES / 2)}\n${zipf}`),
      whole(`${long(70_000, 'a')}\n${long(2 * WORD_SCAN_PIECE_BYTES, 'y')}`, false),
      inside(zipf),
    ];
    const { block } = expectSameScans(calls);
    expect(block.tokens).toBeGreaterThan(500_000);
  });

  test('enough new words to grow the table and its arena several times within one call', () => {
    const random = seededRandom(11);
    const words = Array.from({ length: 60_000 }, (_, i) => `n${i}${random() < 0.1 ? 'ü'.repeat(1 + Math.floor(random() * 40)) : ''}`);
    const text = words.join(' ') + '\n' + words.slice(0, 5000).join('\n');
    for (const slots of [4, 1 << 12]) {
      const { table } = expectSameScans([whole(text), inside(text), whole(text, false)], { slots });
      expect(table.size).toBe(3 + words.length);
    }
  });

  test('words interned by the JavaScript methods between scans, and scans between them', () => {
    const random = seededRandom(19);
    const calls = Array.from({ length: 6 }, (_, i) => whole(zipfText(random, 20_000, 8_000), i !== 3));
    const between = (table: WordTable, call: number): void => {
      for (let i = 0; i < 3000; i++) table.internWord(`w${8_000 + 7 * i + call}`);
      expect(table.findWord('w1')).toBeGreaterThan(0);
    };
    expectSameScans(calls, { between });
  });

  test('words are told apart by their bytes where their hashes are equal, at every length and position', () => {
    // Words of 1–20 bytes stored (by the JavaScript method) under the hash of a word of the same
    // length that differs from them in one byte: the scan finds the slot by the hash and must
    // compare every byte to tell them apart.
    const stored: Array<[Buffer, number]> = [];
    const scanned: string[] = [];
    for (let length = 1; length <= 20; length++) {
      for (let at = 0; at < length; at++) {
        const word = Buffer.alloc(length, 0x61 + (length % 7));
        word[at] = 0x5a;
        const twin = Buffer.from(word);
        twin[at] = 0x59;
        stored.push([twin, hashBytes(word, 0, length)]);
        scanned.push(word.toString('latin1'));
      }
    }
    const between = (table: WordTable, call: number): void => {
      if (call === 0) for (const [twin, hash] of stored) table.intern(twin, 0, twin.length, hash);
    };
    const twins = (entry: number): boolean => entry < 4 || entry >= 4 + stored.length;
    const { table } = expectSameScans([whole('x\n'), whole(scanned.join(' ')), whole(scanned.join('\n'), false)], { between, storedByHash: twins });
    expect(table.size).toBe(4 + 2 * scanned.length);
  });

  test('lookup mode: unknown words are −1 and nothing is added', () => {
    const calls = [whole('harbour quay\nquay harbour\n'), whole('harbour ship <s> quay </s> dock\n\nship', false), inside('quay cargo', false)];
    const { block, table } = expectSameScans(calls);
    expect(Array.from(block.entries.subarray(4, block.tokens))).toEqual([3, -1, 0, 4, 1, -1, -1, 4, -1]);
    expect(table.size).toBe(5);
  });
});

describe('a table that outgrows its memory where it cannot grow and no new one can be had', () => {
  const { growArena, growTable, resized } = WordMemory.prototype;
  afterEach(() => {
    Object.assign(WordMemory.prototype, { growArena, growTable, resized });
  });

  /** Every growth of a table's memory from the `failFrom`-th on fails (as when the process's address
   *  space is used up); returns the growths tried. */
  function failGrowthFrom(failFrom: number): () => number {
    let growths = 0;
    const fails = (): boolean => ++growths >= failFrom;
    WordMemory.prototype.growArena = function (this: WordMemory, words) {
      return fails() ? false : growArena.call(this, words);
    };
    WordMemory.prototype.growTable = function (this: WordMemory, ...args) {
      return fails() ? null : growTable.apply(this, args);
    };
    WordMemory.prototype.resized = function (this: WordMemory, layout) {
      return fails() ? new Error('no WebAssembly memory here') : resized.call(this, layout);
    };
    return () => growths;
  }

  test('moves to ordinary arrays and scans the rest of the range in JavaScript, with the same results', () => {
    const random = seededRandom(23);
    const text = Buffer.from(zipfText(random, 200_000, 50_000) + 'x'.repeat(WORD_SCAN_PIECE_BYTES + 1));
    for (const failFrom of [1, 3, 5]) {
      const js = freshTable('js');
      const jsBlock = newTokenBlock();
      scanLines(text, 0, text.length, js, true, jsBlock);
      const table = freshTable('auto');
      const block = newTokenBlock();
      const growths = failGrowthFrom(failFrom);
      scanLines(text, 0, text.length, table, true, block);
      Object.assign(WordMemory.prototype, { growArena, growTable, resized });
      // The growth that failed, then the new memory that could not be had either.
      expect(growths()).toBe(failFrom + 1);
      expect(table.inWasm).toBe(false);
      expectSameBlocks(block, jsBlock);
      expectSameTables(table, js);
    }
  });

  test('grows in place, and into a new memory for a longer piece, while it can', () => {
    const random = seededRandom(29);
    const text = Buffer.from(zipfText(random, 200_000, 50_000) + 'y'.repeat(WORD_SCAN_PIECE_BYTES + 1) + '\n' + zipfText(random, 50_000, 80_000));
    const js = freshTable('js');
    const jsBlock = newTokenBlock();
    scanLines(text, 0, text.length, js, true, jsBlock);
    const table = freshTable('auto');
    const block = newTokenBlock();
    const growths = failGrowthFrom(Infinity);
    scanLines(text, 0, text.length, table, true, block);
    expect(growths()).toBeGreaterThan(5);
    expect(table.inWasm).toBe(true);
    expectSameBlocks(block, jsBlock);
    expectSameTables(table, js);
  });
});
