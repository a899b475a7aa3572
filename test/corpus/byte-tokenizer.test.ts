import { describe, expect, test } from 'vitest';
import {
  lowerAscii, multiByteSpaceWidth, newTokenBlock, RESERVED_WORDS, reserveWords, scanLines, SentenceTextAdder, type TokenBlock,
} from '../../src/corpus/byte-tokenizer.ts';
import { isSpaceCode, makeTokenizer } from '../../src/corpus/tokenize.ts';
import { WordTable } from '../../src/corpus/word-table.ts';
import { seededRandom } from '../support/seeded.ts';

const plain = { unicode: 'none', lowercase: false, split: 'space' } as const;

/** The sentences of a block as token strings; the reserved words read as `<unk>`, as the tokenizer gives them. */
function sentencesOf(block: TokenBlock, table: WordTable): string[][] {
  const out: string[][] = [];
  let start = 0;
  for (let s = 0; s < block.sentences; s++) {
    const tokens: string[] = [];
    for (let t = start; t < block.sentenceEnds[s]; t++) {
      const entry = block.entries[t];
      tokens.push(entry < 0 ? '(absent)' : entry < RESERVED_WORDS.length ? '<unk>' : table.word(entry));
    }
    out.push(tokens);
    start = block.sentenceEnds[s];
  }
  return out;
}

/** What readChunk + makeTokenizer make of the same lines: the non-blank lines' tokens. */
function reference(text: string): { sentences: string[][]; lines: number; blankLines: number } {
  const tokenize = makeTokenizer(plain);
  const lines = text.split('\n');
  if (text.endsWith('\n')) lines.pop();
  const sentences: string[][] = [];
  let blankLines = 0;
  for (const line of lines) {
    if (/^\s*$/.test(line)) {
      blankLines++;
      continue;
    }
    const out: string[] = [];
    tokenize(line, out);
    sentences.push([...out]);
  }
  return { sentences, lines: lines.length, blankLines };
}

function scan(text: string, table = freshTable(), intern = true): { block: TokenBlock; table: WordTable } {
  const bytes = Buffer.from(text, 'utf8');
  const block = newTokenBlock();
  scanLines(bytes, 0, bytes.length, table, intern, block);
  return { block, table };
}

function freshTable(): WordTable {
  const table = new WordTable();
  reserveWords(table);
  return table;
}

/** Characters the random lines are made of: word characters of 1–4 UTF-8 bytes, every white-space
 *  character, near misses of the multi-byte ones, controls that are not white space, the markers. */
const SPACES = [...Array(0x3001).keys(), 0xfeff].filter((c) => isSpaceCode(c) && c !== 0x0a).map((c) => String.fromCharCode(c));
const NEAR_MISSES = ['\u00a1', '\u00c2', '\u1681', '\u167f', '\u200b', '\u200c', '\u2027', '\u202a', '\u202e', '\u2030', '\u205e', '\u2060', '\u3001', '\u2fff', '\ufefe', '\uff00', '\u0085', '\u001c', '\u001f', '\u0000', '\u007f'];
const WORDS = ['a', 'harbour', 'é', '港', '𠮷', 'ΑΣ', 'x\u0301', '<s>', '</s>', '<unk>', '<S>', '<s', 'ǅ', '🇯🇵'];

function randomText(random: () => number, lines: number): string {
  const pick = <T>(list: readonly T[]): T => list[Math.floor(random() * list.length)];
  let text = '';
  for (let l = 0; l < lines; l++) {
    const parts = Math.floor(random() * 8);
    for (let p = 0; p < parts; p++) {
      const r = random();
      text += r < 0.35 ? pick(SPACES) : r < 0.5 ? pick(NEAR_MISSES) : pick(WORDS);
    }
    text += random() < 0.1 ? '\r\n' : '\n';
  }
  return text;
}

describe('multiByteSpaceWidth', () => {
  test('recognises exactly the non-ASCII white space of the tokenizer, for every code point', () => {
    for (let code = 0x80; code <= 0x10ffff; code++) {
      if (code >= 0xd800 && code <= 0xdfff) continue;
      const bytes = Buffer.from(String.fromCodePoint(code), 'utf8');
      const width = multiByteSpaceWidth(bytes, 0, bytes.length);
      if (width !== (isSpaceCode(code) ? bytes.length : 0)) throw new Error(`U+${code.toString(16)}: width ${width}`);
    }
  });

  test('never reads past the end of the range', () => {
    const bytes = Buffer.from('\u3000', 'utf8');
    expect(multiByteSpaceWidth(bytes, 0, 2)).toBe(0);
    expect(multiByteSpaceWidth(Buffer.from([0xc2]), 0, 1)).toBe(0);
  });
});

describe('scanLines', () => {
  test('gives the tokens, sentences and blank lines of readChunk + makeTokenizer, on random text', () => {
    const random = seededRandom(17);
    for (let round = 0; round < 40; round++) {
      const text = randomText(random, 50);
      const { block, table } = scan(text);
      const expected = reference(text);
      expect(sentencesOf(block, table)).toEqual(expected.sentences);
      expect(block.lines).toBe(expected.lines);
      expect(block.blankLines).toBe(expected.blankLines);
      expect(block.sentences).toBe(expected.lines - expected.blankLines);
    }
  });

  test('a final line without a newline is a line; an empty range is none', () => {
    const { block, table } = scan('one two\n\nthree');
    expect(sentencesOf(block, table)).toEqual([['one', 'two'], ['three']]);
    expect([block.lines, block.blankLines]).toEqual([3, 1]);
    const empty = scan('');
    expect([empty.block.lines, empty.block.sentences, empty.block.tokens]).toEqual([0, 0, 0]);
    const spaceOnly = scan(' \u3000');
    expect([spaceOnly.block.lines, spaceOnly.block.blankLines]).toEqual([1, 1]);
  });

  test('the reserved words get entries 0..2 whatever the text; lookup mode gives −1 for unknown words', () => {
    const table = freshTable();
    scan('<s> </s> <unk> harbour', table);
    expect([0, 1, 2].map((e) => table.word(e))).toEqual(['<s>', '</s>', '<unk>']);
    const { block } = scan('harbour <s> quay </s>', table, false);
    expect(Array.from(block.entries.subarray(0, block.tokens))).toEqual([3, 0, -1, 1]);
    expect(table.size).toBe(4);
  });

  test('looks tokens up in batches with the entries of one lookup per token, across table and array growth', () => {
    // 150,000 tokens of 40,000 words: many batches, the table grown while they run, the entries
    // array grown in the middle of a batch (the block holds a first line already, so the batches do
    // not line up with the array's size). Expected: each token of the reference tokenizer interned
    // (or found) by itself, in order, in a table of its own.
    const random = seededRandom(5);
    const lines: string[] = ['a first line'];
    for (let t = 0; t < 150_000;) {
      const length = 1 + Math.floor(random() * 40);
      const words: string[] = [];
      for (let i = 0; i < length; i++) words.push(`w${Math.floor(random() ** 3 * 40_000)}${random() < 0.01 ? '\u3000港' : ''}`);
      lines.push(words.join(random() < 0.5 ? ' ' : '\t'));
      t += length;
    }
    const expectedTable = freshTable();
    const expected = Int32Array.from(reference(lines.join('\n') + '\n').sentences.flat().map((word) => expectedTable.internWord(word)));
    const table = freshTable();
    for (const intern of [true, false]) {
      const block = newTokenBlock();
      const first = Buffer.from(lines[0] + '\n', 'utf8');
      scanLines(first, 0, first.length, table, intern, block);
      const rest = Buffer.from(lines.slice(1).join('\n') + '\n', 'utf8');
      scanLines(rest, 0, rest.length, table, intern, block);
      expect(block.tokens).toBe(expected.length);
      expect(block.tokens).toBeGreaterThan(newTokenBlock().entries.length);
      expect(Buffer.compare(Buffer.from(block.entries.buffer, 0, 4 * block.tokens), Buffer.from(expected.buffer))).toBe(0);
      expect(block.sentences).toBe(lines.length);
    }
    expect(table.size).toBe(expectedTable.size);
    for (let e = 0; e < table.size; e += 997) expect(table.word(e)).toBe(expectedTable.word(e));
    // Find mode on a table without the words: every entry −1, nothing added.
    const { block } = scan(lines.join('\n'), freshTable(), false);
    expect(block.entries.subarray(0, block.tokens).every((entry) => entry === -1)).toBe(true);
  });

  test('grows its arrays for blocks of many tokens and sentences', () => {
    const text = 'w '.repeat(100_000) + '\n' + 'x\n'.repeat(10_000);
    const { block } = scan(text);
    expect(block.tokens).toBe(110_000);
    expect(block.sentences).toBe(10_001);
  });
});

describe('lowerAscii and SentenceTextAdder', () => {
  test('lowerAscii is toLowerCase on ASCII bytes', () => {
    let all = '';
    for (let c = 0; c < 0x80; c++) all += String.fromCharCode(c);
    const bytes = Buffer.from(`xx${all}yy`, 'latin1');
    const lowered = lowerAscii(bytes, 2, bytes.length - 2, Buffer.alloc(4));
    expect(lowered.toString('latin1', 0, all.length)).toBe(all.toLowerCase());
  });

  test('adds the string tokenizer\'s tokens to the same table as scanned ones', () => {
    const table = freshTable();
    const { block } = scan('Harbour quay\n', table);
    const adder = new SentenceTextAdder(makeTokenizer({ ...plain, lowercase: true }));
    adder.add('HARBOUR Quay <S> new', table, true, block);
    SentenceTextAdder.blankLine(block);
    expect(sentencesOf(block, table)).toEqual([['Harbour', 'quay'], ['harbour', 'quay', '<unk>', 'new']]);
    expect([block.lines, block.blankLines]).toEqual([3, 1]);
  });
});
