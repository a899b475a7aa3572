/**
 * A gzip input cut into pieces of its decompressed text (TextPieces.ofFile), for readers on other threads:
 * the pieces cover the text exactly, end where planChunks cuts the same text as a plain file, number
 * their lines on, and read (readChunk with the piece) as the whole file reads.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import * as path from 'node:path';
import { Readable } from 'node:stream';
import { gzipSync } from 'node:zlib';
import { afterAll, describe, expect, test } from 'vitest';
import { discoverInputs } from '../../src/corpus/discover.ts';
import { TextPieces } from '../../src/corpus/text-pieces.ts';
import { TextStream } from '../../src/corpus/text-stream.ts';
import { planChunks, splitsGzip } from '../../src/corpus/plan.ts';
import { readChunk, type ChunkReadStats } from '../../src/corpus/read.ts';
import type { Chunk, ChunkPiece, InputFile, ReadOptions } from '../../src/corpus/types.ts';
import { QuernError } from '../../src/errors.ts';
import { LINE_BYTES_MAX } from '../../src/limits.ts';
import { seededRandom } from '../support/seeded.ts';

const root = mkdtempSync(path.join(tmpdir(), 'quern-text-pieces-'));
afterAll(() => rmSync(root, { recursive: true, force: true }));

const text: ReadOptions = { format: 'text', textField: undefined, skipBad: false };

/** Lines of random words, blank and white-space lines, CRLF, multi-byte text, some long lines. */
function corpus(lines: number, seed: number): string {
  const random = seededRandom(seed);
  const words = ['harbour', 'net', 'salt', 'brine', 'ébène', 'мост', '港', '🦀', 'a'];
  const out: string[] = [];
  for (let i = 0; i < lines; i++) {
    const kind = random();
    if (kind < 0.05) out.push('');
    else if (kind < 0.08) out.push(' \t');
    else {
      const length = kind > 0.98 ? 300 : 1 + Math.floor(random() * 14);
      const line = Array.from({ length }, () => words[Math.floor(random() * words.length)]).join(' ');
      out.push(random() < 0.2 ? `${line}\r` : line);
    }
  }
  return out.join('\n');
}

async function inputOf(name: string, bytes: Buffer | string): Promise<InputFile> {
  const file = path.join(root, name);
  writeFileSync(file, bytes);
  return (await discoverInputs([file]))[0];
}

async function allPieces(file: InputFile, pieceBytes: number, lineBytesMax?: number): Promise<ChunkPiece[]> {
  const cutter = TextPieces.ofFile(file, 0, pieceBytes, 0, lineBytesMax);
  const pieces: ChunkPiece[] = [];
  for (let piece = await cutter.next(); piece !== undefined; piece = await cutter.next()) pieces.push(piece);
  expect(await cutter.next()).toBeUndefined();
  await cutter.close();
  return pieces;
}

async function readPieces(file: InputFile, pieces: Chunk[], options = text): Promise<{ sentences: Array<[string, number]>; stats: ChunkReadStats[] }> {
  const sentences: Array<[string, number]> = [];
  const stats: ChunkReadStats[] = [];
  let linesBefore = 0;
  for (const piece of pieces) {
    const read = await readChunk(file, piece, options, (sentence, line) => sentences.push([sentence, linesBefore + line]));
    linesBefore += read.lines;
    stats.push(read);
  }
  return { sentences, stats };
}

const newlines = (bytes: Uint8Array): number => bytes.reduce((sum, byte) => sum + (byte === 0x0a ? 1 : 0), 0);

describe('TextPieces of a gzip file', () => {
  test.each([
    ['no final newline', corpus(3000, 7), 1000],
    ['a final newline', corpus(3000, 8) + '\n', 997],
    ['pieces smaller than a line', corpus(400, 9), 1],
  ])('%s: the pieces cover the text and end where the plain file\'s chunks end (pieces of %#)', async (_name, content, pieceBytes) => {
    const plain = await inputOf(`cover-${pieceBytes}.txt`, content);
    const zipped = await inputOf(`cover-${pieceBytes}.txt.gz`, gzipSync(content));
    const pieces = await allPieces(zipped, pieceBytes);
    const chunks = await planChunks([plain], pieceBytes);
    expect(pieces.map((p) => [p.byteStart, p.byteEnd])).toEqual(chunks.map((c) => [c.byteStart, c.byteEnd]));
    expect(pieces.map((p) => p.index)).toEqual(pieces.map((_, i) => i));
    const bytes = Buffer.from(content);
    let before = 0;
    for (const piece of pieces) {
      expect(Buffer.from(piece.data).equals(bytes.subarray(piece.byteStart, piece.byteEnd))).toBe(true);
      expect(piece.linesBefore).toBe(before);
      before += newlines(piece.data);
    }
    expect(pieces.reduce((sum, p) => sum + p.sourceBytes, 0)).toBe(zipped.bytes);
    // Read piece by piece: what the whole file gives, line numbers included.
    const whole = await readPieces(zipped, [{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: zipped.bytes }]);
    const split = await readPieces(zipped, pieces);
    expect(split.sentences).toEqual(whole.sentences);
    expect(split.stats.reduce((sum, s) => sum + s.lines, 0)).toBe(whole.stats[0].lines);
  });

  test('pieces that end where the text ends: the last one still accounts for the rest of the compressed file', async () => {
    const content = 'ninebytes\n'.repeat(50);
    const file = await inputOf('exact.gz', gzipSync(content));
    const pieces = await allPieces(file, 10);
    expect(pieces).toHaveLength(50);
    expect(pieces.reduce((sum, p) => sum + p.sourceBytes, 0)).toBe(file.bytes);
  });

  test('planned with splitGzipFor: ranges of the text where the pieces end, each read alone (decompressing up to it) as the piece reads', async () => {
    const content = corpus(4000, 12);
    const zipped = await inputOf('planned.txt.gz', gzipSync(content));
    const pieces = await allPieces(zipped, 2000);
    const planned = await planChunks([zipped], 2000, { splitGzipFor: { workers: 2 } });
    expect(planned).toEqual(pieces.map((p) => ({ index: p.index, fileIndex: 0, byteStart: p.byteStart, byteEnd: p.byteEnd, linesBefore: p.linesBefore })));
    expect(planned.length).toBeGreaterThan(20);
    // Read without their bytes (readChunk decompresses the file up to each range): what the pieces give.
    const fromRanges = await readPieces(zipped, planned);
    const fromPieces = await readPieces(zipped, pieces);
    expect(fromRanges.sentences).toEqual(fromPieces.sentences);
    expect(fromRanges.stats.map((s) => [s.lines, s.sentences, s.emptyLines])).toEqual(fromPieces.stats.map((s) => [s.lines, s.sentences, s.emptyLines]));
    // Without splitGzipFor, or compressed to under a quarter of a chunk: one chunk, the whole file.
    expect(await planChunks([zipped], 2000)).toEqual([{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: zipped.bytes }]);
    expect(await planChunks([zipped], 4 * zipped.bytes + 4, { splitGzipFor: { workers: 2 } })).toEqual([{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: zipped.bytes }]);
  });

  test('a gzip input is split only when it holds a large share of the text for the workers (splitsGzip)', async () => {
    const shards: InputFile[] = [];
    for (let i = 0; i < 8; i++) shards.push(await inputOf(`shard-${i}.txt.gz`, gzipSync(corpus(1000, 100 + i))));
    const sizes = shards.map((f) => f.bytes);
    const chunk = Math.min(...sizes);
    // Eight shards of about equal size: each is 1/8 of the text. With 2 workers the files keep them
    // busy as they are (1/8 < 1/(2·2)); with 8 each is worth cutting (1/8 ≥ 1/(2·8)).
    for (let i = 0; i < 8; i++) {
      expect(splitsGzip(shards, i, chunk, 2)).toBe(false);
      expect(splitsGzip(shards, i, chunk, 8)).toBe(true);
    }
    const planned = await planChunks(shards, chunk, { splitGzipFor: { workers: 2 } });
    expect(planned.map((c) => [c.fileIndex, c.byteStart, c.byteEnd])).toEqual(shards.map((f, i) => [i, 0, f.bytes]));
    expect((await planChunks(shards, chunk, { splitGzipFor: { workers: 8 } })).length).toBeGreaterThan(8);
    // One alone is all of the text: split for one worker too (its ranges are what the vocabulary
    // pass's main thread hands out); under a quarter of a chunk compressed it never is.
    expect(splitsGzip([shards[0]], 0, chunk, 1)).toBe(true);
    expect(splitsGzip([shards[0]], 0, 4 * shards[0].bytes + 4, 1)).toBe(false);
    // Cut, but its text fits one chunk: planned as the whole file all the same (stored uncompressed,
    // gzip level 0, to be over a quarter of a chunk).
    const text = corpus(1000, 100);
    const textBytes = Buffer.byteLength(text);
    const stored = await inputOf('stored.txt.gz', gzipSync(text, { level: 0 }));
    expect(splitsGzip([stored], 0, textBytes + 1, 1)).toBe(true);
    expect(await planChunks([stored], textBytes + 1, { splitGzipFor: { workers: 1 } })).toEqual([{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: stored.bytes }]);
    expect((await planChunks([stored], Math.floor(textBytes / 2), { splitGzipFor: { workers: 1 } })).length).toBe(2);
    // Beside a plain file of 3 times its size (its text about as large as the gzip file's, taken
    // as 3 times the compressed size), it holds half the text: split for 2 workers (1/2 ≥ 1/4).
    const plain = await inputOf('beside.txt', Buffer.alloc(3 * shards[0].bytes, 'a\n'));
    expect(splitsGzip([shards[0], plain], 0, chunk, 2)).toBe(true);
    expect(splitsGzip([shards[0], plain], 1, chunk, 2)).toBe(false);
    const large = await inputOf('large.txt', Buffer.alloc(30 * shards[0].bytes, 'a\n'));
    expect(splitsGzip([shards[0], large], 0, chunk, 2)).toBe(false);
  });

  test('an empty file is one empty piece', async () => {
    const pieces = await allPieces(await inputOf('empty.gz', gzipSync('')), 64);
    expect(pieces.map((p) => [p.byteStart, p.byteEnd, p.linesBefore, p.data.length])).toEqual([[0, 0, 0, 0]]);
  });

  test('an overlong line ends its piece past the limit; the next piece starts after it, its lines counted on', async () => {
    // The text is decompressed a block (READ_BLOCK_BYTES, 1 MiB) at a time: the line's end is not in
    // sight when its first 1 MiB is.
    const limit = 1 << 20;
    const long = 'w'.repeat(3 * limit);
    const content = `one\ntwo\n${long}\nthree\nfour\n`;
    const pieces = await allPieces(await inputOf('overlong.gz', gzipSync(content)), 6, limit);
    const at = content.indexOf(long);
    const cut = pieces.find((p) => p.byteStart <= at && p.byteEnd > at)!;
    // The piece holds more than the limit of the line, and ends inside it.
    expect(cut.byteEnd - at).toBeGreaterThan(limit);
    expect(cut.byteEnd).toBeLessThan(at + long.length);
    const next = pieces[pieces.indexOf(cut) + 1];
    expect(next.byteStart).toBe(at + long.length + 1);
    expect(next.linesBefore).toBe(3);
    expect(Buffer.from(next.data).toString()).toBe('three\n');
    expect(Buffer.from(pieces.at(-1)!.data).toString()).toBe('four\n');
  });

  test.each([false, true])('a truncated file: the pieces before the break, then readChunk\'s error for the whole file (skipBad %s)', async (skipBad) => {
    const lines = Array.from({ length: 60_000 }, (_, i) => `sentence number ${i} with a few words`);
    const zipped = gzipSync(lines.join('\n') + '\n');
    const file = await inputOf(`cut-${skipBad}.gz`, zipped.subarray(0, zipped.length >> 1));
    const whole = (await readChunk(file, { index: 0, fileIndex: 0, byteStart: 0, byteEnd: file.bytes }, { ...text, skipBad }, () => undefined).catch((e) => e)) as QuernError;
    expect(whole).toBeInstanceOf(QuernError);
    const cutter = TextPieces.ofFile(file, 0, 4096, 0);
    const pieces: ChunkPiece[] = [];
    const error = await (async () => {
      for (;;) {
        const piece = await cutter.next();
        if (piece === undefined) return undefined;
        pieces.push(piece);
      }
    })().catch((e) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect(error.code).toBe('input');
    expect(error.message).toBe(whole.message);
    expect(error.location).toEqual(whole.location);
    expect(pieces.length).toBeGreaterThan(10);
    const { sentences } = await readPieces(file, pieces, { ...text, skipBad });
    expect(sentences.map(([s]) => s)).toEqual(lines.slice(0, sentences.length));
    await cutter.close();
  });

  test('a file that breaks off inside an overlong line: the error a whole read gives, at the line\'s start', async () => {
    // Past LINE_BYTES_MAX (64 MiB) of one line before the data breaks off: the piece cut inside
    // the line has been handed out and the rest is being dropped when the stream fails.
    const head = Array.from({ length: 2000 }, (_, i) => `line ${i} of the head`).join('\n') + '\n';
    const zipped = gzipSync(Buffer.concat([Buffer.from(head), Buffer.alloc(LINE_BYTES_MAX + (4 << 20), 0x71)]), { level: 1 });
    const file = await inputOf('overlong-cut.gz', zipped.subarray(0, zipped.length - 64));
    const whole = (await readChunk(file, { index: 0, fileIndex: 0, byteStart: 0, byteEnd: file.bytes }, { ...text, skipBad: true }, () => undefined).catch((e) => e)) as QuernError;
    expect(whole.message).toMatch(/truncated or corrupt gzip data/);
    const cutter = TextPieces.ofFile(file, 0, 1 << 20, 0);
    const error = await (async () => {
      for (let piece = await cutter.next(); piece !== undefined; piece = await cutter.next());
    })().catch((e) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect(error.message).toBe(whole.message);
    expect(error.location).toEqual({ file: file.path, line: 2001, byteOffset: Buffer.byteLength(head) });
    await cutter.close();
  });

  test('a bad line in a later piece is named by its line in the file, as in the whole file', async () => {
    const lines = Array.from({ length: 5000 }, (_, i) => `line ${i}`);
    const content = Buffer.concat([Buffer.from(lines.slice(0, 4000).join('\n') + '\n'), Buffer.from([0xc3, 0x28, 0x0a]), Buffer.from(lines.slice(4000).join('\n'))]);
    const file = await inputOf('bad-utf8.gz', gzipSync(content));
    const whole = (await readChunk(file, { index: 0, fileIndex: 0, byteStart: 0, byteEnd: file.bytes }, text, () => undefined).catch((e) => e)) as QuernError;
    expect(whole.location).toMatchObject({ line: 4001 });
    const pieces = await allPieces(file, 1024);
    const error = (await readPieces(file, pieces).catch((e) => e)) as QuernError;
    expect(error).toBeInstanceOf(QuernError);
    expect(error.message).toBe(whole.message);
    const skipped = await readPieces(file, pieces, { ...text, skipBad: true });
    const samples = skipped.stats.flatMap((s) => s.skippedSamples);
    expect(samples).toEqual([{ line: 4001, lineInChunk: expect.any(Number), byteOffset: whole.location!.byteOffset, reason: 'invalid UTF-8' }]);
  });
});

describe('TextPieces of a stream that is not gzip', () => {
  /** `bytes` as a stream of blocks of `blockBytes` (a pipe gives small ones), then `failure` if given. */
  function streamOf(bytes: Buffer, blockBytes: number, failure?: Error): Readable {
    return Readable.from((async function* () {
      for (let start = 0; start < bytes.length; start += blockBytes) yield bytes.subarray(start, start + blockBytes);
      if (failure !== undefined) throw failure;
    })(), { objectMode: false });
  }

  test('the pieces end where the plain file\'s chunks end and read as the file reads; an empty stream is one empty piece', async () => {
    const content = Buffer.from(corpus(3000, 13) + '\n');
    const plain = await inputOf('streamed.txt', content);
    const cutter = new TextPieces(new TextStream(plain, streamOf(content, 777), undefined), 0, 1000, 0);
    const pieces: ChunkPiece[] = [];
    for (let piece = await cutter.next(); piece !== undefined; piece = await cutter.next()) pieces.push(piece);
    await cutter.close();
    expect(pieces.map((p) => [p.byteStart, p.byteEnd])).toEqual((await planChunks([plain], 1000)).map((c) => [c.byteStart, c.byteEnd]));
    // Progress: the pieces account for every byte of the stream.
    expect(pieces.reduce((sum, p) => sum + p.sourceBytes, 0)).toBe(content.length);
    const whole = await readPieces(plain, [{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: plain.bytes }]);
    const split = await readPieces({ ...plain, stdin: true }, pieces);
    expect(split.sentences).toEqual(whole.sentences);

    const empty = new TextPieces(new TextStream(plain, streamOf(Buffer.alloc(0), 1), undefined), 0, 1000, 0);
    expect(await empty.next()).toMatchObject({ byteStart: 0, byteEnd: 0, linesBefore: 0, sourceBytes: 0 });
    expect(await empty.next()).toBeUndefined();
  });

  test('a stream that fails: the pieces before, then an io error naming the input and the cause', async () => {
    const content = Buffer.from('one line\n'.repeat(1000));
    const plain = await inputOf('failing.txt', content);
    const cutter = new TextPieces(new TextStream(plain, streamOf(content, 512, new Error('EIO: the pipe broke')), undefined), 0, 1000, 0);
    const pieces: ChunkPiece[] = [];
    const error = await (async () => {
      for (let piece = await cutter.next(); piece !== undefined; piece = await cutter.next()) pieces.push(piece);
    })().catch((e) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect(error.code).toBe('io');
    expect(error.message).toBe(`cannot read ${plain.path}: EIO: the pipe broke`);
    expect(pieces.length).toBeGreaterThan(5);
    expect(pieces.at(-1)!.byteEnd).toBeLessThan(content.length);
  });
});
