import { mkdtempSync, rmSync, unlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import * as path from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { discoverInputs } from '../../src/corpus/discover.ts';
import { planChunks } from '../../src/corpus/plan.ts';
import { readChunk } from '../../src/corpus/read.ts';
import type { Chunk, InputFile, ReadOptions } from '../../src/corpus/types.ts';
import { QuernError } from '../../src/errors.ts';
import { LINE_BYTES_MAX, READ_BLOCK_BYTES, SKIPPED_SAMPLES_PER_FILE_MAX } from '../../src/limits.ts';

let root: string;
let counter = 0;

beforeAll(() => {
  root = mkdtempSync(path.join(tmpdir(), 'quern-read-'));
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
const jsonl: ReadOptions = { format: 'jsonl', textField: ['body', 'text'], skipBad: false };

async function read(file: InputFile, options: ReadOptions, chunk = whole(file)) {
  const sentences: string[] = [];
  const progress: number[] = [];
  const stats = await readChunk(file, chunk, options, (s) => sentences.push(s), (b) => { progress.push(b); });
  return { sentences, stats, progress };
}

async function failure(file: InputFile, options: ReadOptions, chunk = whole(file)): Promise<QuernError> {
  const error = await readChunk(file, chunk, options, () => {}).catch((e: unknown) => e);
  expect(error).toBeInstanceOf(QuernError);
  return error as QuernError;
}

const PLAIN = 'alpha beta\n\n   \ngamma\r\n\u00e9t\u00e9 \u6e2f\nlast line';
const PLAIN_SENTENCES = ['alpha beta', 'gamma', '\u00e9t\u00e9 \u6e2f', 'last line'];

const RECORDS = [
  '{"id":1,"body":{"text":"one\\ntwo\\r\\n\\nthree"}}',
  '',
  '{"id":2,"body":{"text":"  "}}',
  '{"id":3,"body":{"text":"four","lang":"en"}}',
].join('\n') + '\n';

describe('readChunk: good input', () => {
  test('plain text: non-blank lines are sentences, blank ones counted, CR stripped', async () => {
    const file = await inputOf('plain.txt', PLAIN);
    const { sentences, stats, progress } = await read(file, text);
    expect(sentences).toEqual(PLAIN_SENTENCES);
    expect(stats).toEqual({ bytesRead: file.bytes, lines: 6, sentences: 4, emptyLines: 2, skipped: 0, skippedSamples: [] });
    expect(progress.at(-1)).toBe(file.bytes);
  });

  test('gzip text (detected by magic) reads the same; bytesRead counts compressed bytes', async () => {
    const file = await inputOf('plain-but-zipped.txt', gzipSync(PLAIN));
    expect(file.gzip).toBe(true);
    const { sentences, stats, progress } = await read(file, text);
    expect(sentences).toEqual(PLAIN_SENTENCES);
    expect(stats).toMatchObject({ bytesRead: file.bytes, lines: 6, sentences: 4, emptyLines: 2 });
    expect(progress.at(-1)).toBe(file.bytes);
  });

  test('JSONL: nested text field, each line of it a sentence; blank lines and blank fields counted', async () => {
    for (const file of [await inputOf('r.jsonl', RECORDS), await inputOf('r.jsonl.gz', gzipSync(RECORDS))]) {
      expect(file.format).toBe('jsonl');
      const { sentences, stats } = await read(file, jsonl);
      expect(sentences).toEqual(['one', 'two', 'three', 'four']);
      // Empty: the blank line inside record 1, the blank file line, record 2's white-space text.
      expect(stats).toMatchObject({ lines: 4, sentences: 4, emptyLines: 3, skipped: 0, bytesRead: file.bytes });
    }
  });

  test('an empty file and an empty range read nothing', async () => {
    const file = await inputOf('empty.txt', '');
    expect((await read(file, text)).stats).toEqual({ bytesRead: 0, lines: 0, sentences: 0, emptyLines: 0, skipped: 0, skippedSamples: [] });
    const gz = await inputOf('empty.gz', gzipSync(''));
    expect((await read(gz, text)).stats).toMatchObject({ bytesRead: gz.bytes, lines: 0, sentences: 0 });
  });

  test('a UTF-8 byte-order mark at the start is dropped', async () => {
    const file = await inputOf('bom.jsonl', '\ufeff{"body":{"text":"hi"}}\n');
    expect((await read(file, jsonl)).sentences).toEqual(['hi']);
  });

  test('lines across block boundaries, and characters split by them, are read whole', async () => {
    const long = 'w'.repeat(READ_BLOCK_BYTES + 12_345);
    const prefix = 'a'.repeat(READ_BLOCK_BYTES - 1 - 10); // "é" straddles the first block boundary
    const content = `${'x'.repeat(9)}\n${prefix}\u00e9 tail\n${long}\nshort\n${long}`;
    const expected = ['x'.repeat(9), `${prefix}\u00e9 tail`, long, 'short', long];
    for (const file of [await inputOf('blocks.txt', content), await inputOf('blocks.gz', gzipSync(content))]) {
      const { sentences, stats, progress } = await read(file, text);
      expect(sentences).toEqual(expected);
      expect(stats.lines).toBe(5);
      if (!file.gzip) expect(progress.length).toBeGreaterThan(2);
    }
  });
});

/** A file whose line 3 is `third`: line 1 is good, line 2 blank, line 4 good. */
async function badThird(name: string, third: string | Buffer, format: 'text' | 'jsonl') {
  const line1 = format === 'jsonl' ? '{"body":{"text":"a"}}\n' : 'first line one\n';
  const line4 = format === 'jsonl' ? '{"body":{"text":"ok"}}' : 'good line';
  const data = Buffer.concat([Buffer.from(`${line1}\n`), Buffer.from(third), Buffer.from(`\n${line4}\n`)]);
  const file = await inputOf(name, data);
  return { file, offset: Buffer.byteLength(line1) + 1 };
}

describe('readChunk: bad input', () => {
  const jsonlCases: Array<[string, string, RegExp]> = [
    ['malformed JSON', '{"body":{"text":', /malformed JSON/],
    ['missing field', '{"body":{"title":"x"}}', /field "body.text" is missing/],
    ['field of an intermediate non-object', '{"body":"flat"}', /field "body.text" is missing/],
    ['non-string field', '{"body":{"text":5}}', /field "body.text" is a number, not a string/],
    ['null field', '{"body":{"text":null}}', /is null, not a string/],
    ['non-object record', '[1,2]', /field "body.text" is missing/],
  ];

  test.each(jsonlCases)('JSONL %s stops with file, line and byte', async (_name, third, reason) => {
    const { file, offset } = await badThird('bad.jsonl', third, 'jsonl');
    const error = await failure(file, jsonl);
    expect(error.code).toBe('input');
    expect(error.location).toEqual({ file: file.path, line: 3, byteOffset: offset });
    expect(error.message).toMatch(reason);
    expect(error.message).toContain(`${file.path}:3 (byte ${offset})`);
  });

  test.each(jsonlCases)('JSONL %s with skipBad is counted and sampled', async (_name, third, reason) => {
    const { file, offset } = await badThird('bad.jsonl', third, 'jsonl');
    const { sentences, stats } = await read(file, { ...jsonl, skipBad: true });
    expect(sentences).toEqual(['a', 'ok']);
    expect(stats).toMatchObject({ lines: 4, sentences: 2, emptyLines: 1, skipped: 1 });
    expect(stats.skippedSamples).toEqual([{ line: 3, lineInChunk: 3, byteOffset: offset, reason: expect.stringMatching(reason) }]);
  });

  test('invalid UTF-8 stops (text and JSONL, plain and gzip) or is skipped', async () => {
    const bad = Buffer.from([0x62, 0x61, 0xff, 0x64]); // "ba\xffd"
    for (const format of ['text', 'jsonl'] as const) {
      const { file, offset } = await badThird(`utf8.${format === 'jsonl' ? 'jsonl' : 'txt'}`, bad, format);
      const options = format === 'jsonl' ? jsonl : text;
      const error = await failure(file, options);
      expect(error.location).toEqual({ file: file.path, line: 3, byteOffset: offset });
      expect(error.message).toMatch(/invalid UTF-8/);
      const { stats } = await read(file, { ...options, skipBad: true });
      expect(stats).toMatchObject({ lines: 4, sentences: 2, skipped: 1 });
      expect(stats.skippedSamples[0]).toMatchObject({ line: 3, byteOffset: offset, reason: 'invalid UTF-8' });
    }
    const raw = Buffer.concat([Buffer.from('one\ntwo\n'), bad]); // the bad line is the last, without newline
    const gz = await inputOf('utf8.gz', gzipSync(raw));
    const error = await failure(gz, text);
    expect(error.location).toEqual({ file: gz.path, line: 3, byteOffset: 8 });
    expect(error.message).toContain('decompressed stream');
  });

  test('invalid UTF-8 in the middle of a later chunk reports the absolute line number', async () => {
    const lines = Array.from({ length: 5000 }, (_, i) => `line ${i + 1} of the corpus`);
    const badLine = 3777;
    const before = Buffer.from(lines.slice(0, badLine - 1).join('\n') + '\n');
    const data = Buffer.concat([before, Buffer.from([0xc3, 0x28]), Buffer.from('\n' + lines.slice(badLine).join('\n') + '\n')]);
    const file = await inputOf('split.txt', data);
    const chunks = await planChunks([file], 10_000);
    const chunk = chunks.find((c) => c.byteStart < before.length && before.length < c.byteEnd)!;
    expect(chunk.byteStart).toBeGreaterThan(0);
    expect(chunk.byteStart).toBeLessThan(before.length); // the bad line is not the chunk's first
    const error = await failure(file, text, chunk);
    expect(error.location).toEqual({ file: file.path, line: badLine, byteOffset: before.length });
    const linesBefore = data.subarray(0, chunk.byteStart).toString('latin1').split('\n').length - 1;
    const { stats } = await read(file, { ...text, skipBad: true }, chunk);
    expect(stats.skipped).toBe(1);
    expect(stats.skippedSamples).toEqual([
      { line: undefined, lineInChunk: badLine - linesBefore, byteOffset: before.length, reason: 'invalid UTF-8' },
    ]);
  });

  test('a line longer than LINE_BYTES_MAX stops, or with skipBad is skipped', async () => {
    const data = Buffer.alloc(LINE_BYTES_MAX + 100, 0x61);
    Buffer.from('head\n').copy(data, 0);
    data.write('\nnext\n', data.length - 6, 'latin1');
    const file = await inputOf('long.txt', data);
    const error = await failure(file, text);
    expect(error.location).toEqual({ file: file.path, line: 2, byteOffset: 5 });
    expect(error.message).toContain(`line longer than ${LINE_BYTES_MAX} bytes`);
    const { sentences, stats } = await read(file, { ...text, skipBad: true });
    expect(sentences).toEqual(['head', 'next']);
    expect(stats).toMatchObject({ lines: 3, sentences: 2, skipped: 1 });
    expect(stats.skippedSamples[0]).toMatchObject({ line: 2, byteOffset: 5 });
  });

  test('byte offsets of bad records count UTF-8 bytes, not characters', async () => {
    const records = [
      '{"body":{"text":"港の朝 🦀"}}',
      '{"body":{"text":5}}',
      '{"body":{"text":"ébène"}}',
      '{bad',
      '{"body":{"text":"end"}}',
    ];
    const file = await inputOf('offsets.jsonl', records.join('\n') + '\n');
    const offsetOf = (line: number): number => Buffer.byteLength(records.slice(0, line - 1).join('\n') + '\n');
    expect((await failure(file, jsonl)).location).toEqual({ file: file.path, line: 2, byteOffset: offsetOf(2) });
    const { sentences, stats } = await read(file, { ...jsonl, skipBad: true });
    expect(sentences).toEqual(['港の朝 🦀', 'ébène', 'end']);
    expect(stats.skippedSamples.map((s) => [s.line, s.byteOffset])).toEqual([[2, offsetOf(2)], [4, offsetOf(4)]]);
  });

  test('samples are bounded, the count is exact', async () => {
    const file = await inputOf('many-bad.jsonl', '{oops}\n'.repeat(SKIPPED_SAMPLES_PER_FILE_MAX + 15));
    const { stats } = await read(file, { ...jsonl, skipBad: true });
    expect(stats.skipped).toBe(SKIPPED_SAMPLES_PER_FILE_MAX + 15);
    expect(stats.skippedSamples.length).toBe(SKIPPED_SAMPLES_PER_FILE_MAX);
    expect(stats.skippedSamples[4]).toMatchObject({ line: 5, byteOffset: 28 });
  });

  test('a truncated gzip file is fatal even with skipBad, located in the decompressed stream', async () => {
    const lines = Array.from({ length: 60_000 }, (_, i) => `sentence number ${i} with a few words`);
    const zipped = gzipSync(lines.join('\n') + '\n');
    const file = await inputOf('cut.gz', zipped.subarray(0, zipped.length >> 1));
    for (const skipBad of [false, true]) {
      const sentences: string[] = [];
      const error = (await readChunk(file, whole(file), { ...text, skipBad }, (s) => sentences.push(s)).catch((e) => e)) as QuernError;
      expect(error).toBeInstanceOf(QuernError);
      expect(error.code).toBe('input');
      expect(error.message).toMatch(/truncated or corrupt gzip data/);
      expect(error.message).toMatch(/decompressed stream/);
      expect(sentences.length).toBeGreaterThan(0);
      expect(sentences).toEqual(lines.slice(0, sentences.length));
      expect(error.location).toEqual({
        file: file.path,
        line: sentences.length + 1,
        byteOffset: Buffer.byteLength(sentences.join('\n') + '\n'),
      });
    }
  });

  test('corrupt gzip data is an input error', async () => {
    const zipped = Buffer.from(gzipSync(Array.from({ length: 2000 }, (_, i) => `row ${i}`).join('\n')));
    zipped[zipped.length >> 1] ^= 0xff;
    zipped[(zipped.length >> 1) + 1] ^= 0xff;
    const file = await inputOf('flipped.gz', zipped);
    const error = await failure(file, text);
    expect(error.code).toBe('input');
    expect(error.message).toMatch(/gzip/);
  });

  test('an unreadable file is an io error naming it; a changed file an input error', async () => {
    const gone = await inputOf('gone.txt', 'one\ntwo\n');
    unlinkSync(gone.path);
    const error = await failure(gone, text);
    expect(error.code).toBe('io');
    expect(error.message).toContain(gone.path);
    const gz = await inputOf('gone.gz', gzipSync('one\n'));
    unlinkSync(gz.path);
    expect((await failure(gz, text)).code).toBe('io');
    const shrunk = await inputOf('shrunk.txt', 'one\ntwo\nthree\n');
    writeFileSync(shrunk.path, 'one\n');
    expect(await failure(shrunk, text)).toMatchObject({ code: 'input', message: expect.stringContaining('changed') });
  });

  test('JSONL without a text field is a config error; a format mismatch an assertion', async () => {
    const file = await inputOf('x.jsonl', '{"t":"a"}\n');
    await expect(readChunk(file, whole(file), { ...jsonl, textField: undefined }, () => {})).rejects.toMatchObject({ code: 'config' });
    await expect(readChunk(file, whole(file), text, () => {})).rejects.toThrow(/assertion failed/);
  });

  test('an error thrown by the sentence handler passes through unchanged', async () => {
    const file = await inputOf('cb.txt', 'a\nb\n');
    const boom = new Error('stop here');
    await expect(readChunk(file, whole(file), text, () => { throw boom; })).rejects.toBe(boom);
  });
});
