import { describe, expect, test } from 'vitest';
import { hashBytes, WordTable } from '../../src/corpus/word-table.ts';
import { seededRandom } from '../support/seeded.ts';

const bytesOf = (word: string): Buffer => Buffer.from(word, 'utf8');

describe('WordTable', () => {
  test('gives dense entries in order of first insertion and finds them again, through growth', () => {
    const random = seededRandom(5);
    const table = new WordTable(4);
    const naive = new Map<string, number>();
    for (let i = 0; i < 20_000; i++) {
      const word = `w${Math.floor(random() ** 2 * 5000)}${random() < 0.1 ? 'é港' : ''}`;
      const bytes = bytesOf(word);
      const entry = table.intern(bytes, 0, bytes.length, hashBytes(bytes, 0, bytes.length));
      if (!naive.has(word)) naive.set(word, naive.size);
      expect(entry).toBe(naive.get(word));
    }
    expect(table.size).toBe(naive.size);
    for (const [word, entry] of naive) {
      expect(table.findWord(word)).toBe(entry);
      expect(table.word(entry)).toBe(word);
      expect(Buffer.from(table.wordBytes(entry)).toString('utf8')).toBe(word);
    }
    expect(table.findWord('absent')).toBe(-1);
  });

  test('words are compared by their bytes: prefixes, NUL bytes and equal hashes stay apart', () => {
    const table = new WordTable(8);
    const words = ['a', 'ab', 'a\u0000', '\u0000', 'ab\u0000', '', 'b'];
    for (const word of words) expect(table.internWord(word)).toBe(words.indexOf(word));
    for (const word of words) expect(table.findWord(word)).toBe(words.indexOf(word));
    // Forced collisions: different words under one hash still get their own entries.
    const forced = new WordTable(8);
    const x = bytesOf('x');
    const y = bytesOf('y');
    expect(forced.intern(x, 0, 1, 42)).toBe(0);
    expect(forced.intern(y, 0, 1, 42)).toBe(1);
    expect(forced.find(x, 0, 1, 42)).toBe(0);
    expect(forced.find(y, 0, 1, 42)).toBe(1);
    expect(forced.find(bytesOf('z'), 0, 1, 42)).toBe(-1);
    // Words of 0 to 12 bytes (held in their slots up to 7, compared with their records beyond),
    // sharing prefixes and NUL bytes, all under one hash, looked up inside buffers whose bytes
    // around them differ.
    const lengths = new WordTable(8);
    const variants: Buffer[] = [];
    for (let length = 0; length <= 12; length++) {
      variants.push(Buffer.alloc(length, 0x61), Buffer.alloc(length, 0), Buffer.concat([Buffer.alloc(Math.max(0, length - 1), 0x61), Buffer.from([0x62])]).subarray(0, length));
    }
    const distinct = [...new Map(variants.map((v) => [v.toString('hex'), v])).values()];
    distinct.forEach((word, entry) => expect(lengths.intern(Buffer.concat([Buffer.from('\u00ff'), word, Buffer.from('zz')]), 2, 2 + word.length, 7)).toBe(entry));
    distinct.forEach((word, entry) => expect(lengths.find(Buffer.concat([Buffer.from([0x61, 0]), word, Buffer.from([0x61, 0])]), 2, 2 + word.length, 7)).toBe(entry));
    expect(lengths.find(Buffer.alloc(13, 0x61), 0, 13, 7)).toBe(-1);
    expect(lengths.find(Buffer.from('aaaaaac'), 0, 7, 7)).toBe(-1);
    expect(lengths.find(Buffer.from('aaaaaaaaaaac'), 0, 12, 7)).toBe(-1);
  });

  test('looks words up inside a larger buffer by range', () => {
    const table = new WordTable();
    const line = bytesOf('the quay, the quay');
    const first = table.intern(line, 4, 8, hashBytes(line, 4, 8));
    expect(table.intern(line, 14, 18, hashBytes(line, 14, 18))).toBe(first);
    expect(table.word(first)).toBe('quay');
    expect(table.find(line, 0, 3, hashBytes(line, 0, 3))).toBe(-1);
  });

  test('sizedFor leaves room for that many words', () => {
    const table = WordTable.sizedFor(10_000);
    const bytesBefore = table.bytes;
    for (let i = 0; i < 10_000; i++) table.internWord(`word${i}`);
    expect(table.size).toBe(10_000);
    expect(table.bytes).toBe(bytesBefore); // nothing had to grow
  });
});
