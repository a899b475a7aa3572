import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import * as path from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { RESERVED_WORDS, reserveWords, type TokenBlock } from '../../src/corpus/byte-tokenizer.ts';
import { discoverInputs } from '../../src/corpus/discover.ts';
import { readChunk, readChunkLines, type ChunkReadStats } from '../../src/corpus/read.ts';
import { TokenReader } from '../../src/corpus/read-tokens.ts';
import { makeTokenizer } from '../../src/corpus/tokenize.ts';
import type { Chunk, InputFile, NormalizeOptions, ReadOptions } from '../../src/corpus/types.ts';
import { WordTable } from '../../src/corpus/word-table.ts';
import { QuernError } from '../../src/errors.ts';
import { LINE_BYTES_MAX, READ_BLOCK_BYTES } from '../../src/limits.ts';
import { seededRandom } from '../support/seeded.ts';

let root: string;
let counter = 0;
beforeAll(() => {
  root = mkdtempSync(path.join(tmpdir(), 'quern-read-tokens-'));
});
afterAll(() => rmSync(root, { recursive: true, force: true }));

async function inputOf(name: string, data: string | Uint8Array): Promise<InputFile> {
  const filePath = path.join(root, `${counter++}-${name}`);
  writeFileSync(filePath, data);
  const [file] = await discoverInputs([filePath], {});
  return file;
}

const whole = (file: InputFile): Chunk => ({ index: 0, fileIndex: 0, byteStart: 0, byteEnd: file.bytes });
const text: ReadOptions = { format: 'text', textField: undefined, skipBad: false };

/** readChunk + makeTokenizer: the sentences' tokens as the string path makes them. */
async function reference(file: InputFile, options: ReadOptions, normalize: NormalizeOptions, chunk = whole(file)) {
  const tokenize = makeTokenizer(normalize);
  const sentences: string[][] = [];
  const out: string[] = [];
  const stats = await readChunk(file, chunk, options, (sentence) => {
    tokenize(sentence, out);
    sentences.push([...out]);
  });
  return { sentences, stats };
}

/** TokenReader's sentences as strings (reserved entries read as `<unk>`), its stats and block count. */
async function viaTokens(file: InputFile, options: ReadOptions, normalize: NormalizeOptions, chunk = whole(file)) {
  const table = new WordTable();
  reserveWords(table);
  const reader = new TokenReader(normalize, table, true);
  const sentences: string[][] = [];
  let calls = 0;
  const stats = await reader.read(file, chunk, options, (block: TokenBlock) => {
    calls++;
    let start = 0;
    for (let s = 0; s < block.sentences; s++) {
      const tokens: string[] = [];
      for (let t = start; t < block.sentenceEnds[s]; t++) {
        const entry = block.entries[t];
        tokens.push(entry < RESERVED_WORDS.length ? '<unk>' : table.word(entry));
      }
      sentences.push(tokens);
      start = block.sentenceEnds[s];
    }
  });
  return { sentences, stats, calls };
}

const NORMALIZATIONS: NormalizeOptions[] = [];
for (const unicode of ['none', 'nfc', 'nfkc'] as const) {
  for (const lowercase of [false, true]) for (const split of ['space', 'chars'] as const) NORMALIZATIONS.push({ unicode, lowercase, split });
}

/** Lines mixing ASCII and non-ASCII text, case, the markers, every kind of white space, blank lines. */
function mixedText(seed: number, lines: number): string {
  const random = seededRandom(seed);
  const pieces = ['Harbour', 'QUAY', 'the', '<S>', '</s>', '<UNK>', 'ΑΣ', 'Σ', 'ΑΣ\ufeffΒ', 'İ', 'straße', '\ufb01ne', '\uff21B',
    'cafe\u0301', '港', '🇯🇵', '\u00a8x', ' ', '  ', '\t', '\u00a0', '\u3000', '\u2028', '\u202f', '\ufeff', '\u200b', '\r'];
  const out: string[] = [];
  for (let l = 0; l < lines; l++) {
    const n = Math.floor(random() * 9);
    let line = '';
    for (let k = 0; k < n; k++) line += pieces[Math.floor(random() * pieces.length)] + (random() < 0.7 ? ' ' : '');
    // Some lines are pure ASCII, so that a block has both kinds.
    out.push(random() < 0.4 ? line.replace(/[^\x00-\x7f]/g, 'x') : line);
  }
  return '\ufeff' + out.join(random() < 0.5 ? '\n' : '\r\n');
}

describe('TokenReader', () => {
  test.each(NORMALIZATIONS.map((n) => [`${n.unicode}${n.lowercase ? ' lowercase' : ''} ${n.split}`, n] as const))(
    'gives the tokens and statistics of readChunk + makeTokenizer (%s)',
    async (_name, normalize) => {
      const file = await inputOf('mixed.txt', mixedText(3, 3000));
      const expected = await reference(file, text, normalize);
      const actual = await viaTokens(file, text, normalize);
      expect(actual.sentences).toEqual(expected.sentences);
      expect(actual.stats).toEqual(expected.stats);
    },
  );

  test('hands the tokens over block by block, in order, across lines that span blocks (plain and gzip)', async () => {
    const long = 'quay '.repeat(Math.ceil((1.5 * READ_BLOCK_BYTES) / 5)).trim();
    const body = ['first line', long, 'after the long one', ...Array.from({ length: 200_000 }, (_, i) => `line ${i % 977} of it`)].join('\n') + '\n';
    for (const [name, data] of [['blocks.txt', body], ['blocks.txt.gz', gzipSync(body)]] as const) {
      const file = await inputOf(name, data);
      const expected = await reference(file, text, NORMALIZATIONS[0]);
      const actual = await viaTokens(file, text, NORMALIZATIONS[0]);
      expect(actual.sentences).toEqual(expected.sentences);
      expect(actual.stats).toEqual(expected.stats);
      expect(actual.calls).toBeGreaterThan(2);
    }
  });

  test('JSONL text fields take the string path with the same result', async () => {
    const records = ['{"body":{"text":"The QUAY\\n\\nΣ <s>港"}}', '', '{"body":{"text":"  "}}', '{"body":{"text":"last\\r\\nline"}}'].join('\n') + '\n';
    const file = await inputOf('records.jsonl', records);
    const options: ReadOptions = { format: 'jsonl', textField: ['body', 'text'], skipBad: false };
    for (const normalize of NORMALIZATIONS) {
      const expected = await reference(file, options, normalize);
      const actual = await viaTokens(file, options, normalize);
      expect(actual.sentences).toEqual(expected.sentences);
      expect(actual.stats).toEqual(expected.stats);
    }
  });

  test('chunks that start mid-file and bad lines (skipped or stopping) behave as with readChunk', async () => {
    const lines = Array.from({ length: 3000 }, (_, i) => `Line ${i} ${i % 7 === 0 ? 'É' : 'e'}`);
    const data = Buffer.concat([Buffer.from(lines.slice(0, 2000).join('\n') + '\n'), Buffer.from([0x61, 0xff, 0x0a]), Buffer.from(lines.slice(2000).join('\n'))]);
    const file = await inputOf('bad.txt', data);
    const chunk: Chunk = { index: 0, fileIndex: 0, byteStart: data.indexOf(0x0a, 5000) + 1, byteEnd: file.bytes };
    for (const normalize of [NORMALIZATIONS[0], NORMALIZATIONS[3]]) {
      const skipping = { ...text, skipBad: true };
      const expected = await reference(file, skipping, normalize, chunk);
      const actual = await viaTokens(file, skipping, normalize, chunk);
      expect(actual.sentences).toEqual(expected.sentences);
      expect(actual.stats).toEqual(expected.stats);
      expect(actual.stats.skipped).toBe(1);
      const error = await viaTokens(file, text, normalize, chunk).catch((e: unknown) => e);
      const expectedError = await reference(file, text, normalize, chunk).catch((e: unknown) => e);
      expect(error).toBeInstanceOf(QuernError);
      expect((error as QuernError).message).toBe((expectedError as QuernError).message);
      expect((error as QuernError).location).toEqual((expectedError as QuernError).location);
    }
  });
});

describe('readChunkLines', () => {
  test('reports the statistics readChunk reports, with the byte-order mark dropped', async () => {
    const file = await inputOf('plain.txt', '\ufeffalpha beta\n\n   \ngamma\r\n\u00e9t\u00e9 \u6e2f\nlast line');
    const ranges: string[] = [];
    const stats: ChunkReadStats = await readChunkLines(file, whole(file), text, (bytes, start, end) => {
      const chunkText = bytes.toString('utf8', start, end);
      ranges.push(chunkText);
      const lines = chunkText.split('\n');
      if (chunkText.endsWith('\n')) lines.pop();
      return { lines: lines.length, blankLines: lines.filter((l) => /^\s*$/.test(l)).length };
    });
    expect(ranges.join('')).toBe('alpha beta\n\n   \ngamma\r\n\u00e9t\u00e9 \u6e2f\nlast line');
    expect(stats).toEqual({ bytesRead: file.bytes, lines: 6, sentences: 4, emptyLines: 2, skipped: 0, skippedSamples: [] });
  });

  test('an overlong line is skipped or stops, as with readChunk', async () => {
    const data = Buffer.alloc(LINE_BYTES_MAX + 100, 0x61);
    Buffer.from('head\n').copy(data, 0);
    data.write('\nnext\n', data.length - 6, 'latin1');
    const file = await inputOf('long.txt', data);
    const normalize = NORMALIZATIONS[0];
    const { sentences, stats } = await viaTokens(file, { ...text, skipBad: true }, normalize);
    expect(sentences).toEqual([['head'], ['next']]);
    expect(stats).toMatchObject({ lines: 3, sentences: 2, skipped: 1 });
    const error = await viaTokens(file, text, normalize).catch((e: unknown) => e);
    expect((error as QuernError).message).toContain(`line longer than ${LINE_BYTES_MAX} bytes`);
  });

  test('takes text input only', async () => {
    const file = await inputOf('r.jsonl', '{"t":"x"}\n');
    await expect(readChunkLines(file, whole(file), { format: 'jsonl', textField: ['t'], skipBad: false }, () => ({ lines: 0, blankLines: 0 }))).rejects.toThrow(/assertion failed/);
  });
});
