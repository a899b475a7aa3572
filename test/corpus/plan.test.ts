import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import * as path from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { discoverInputs } from '../../src/corpus/discover.ts';
import { planChunks } from '../../src/corpus/plan.ts';
import { readChunk } from '../../src/corpus/read.ts';
import type { Chunk, InputFile, ReadOptions } from '../../src/corpus/types.ts';
import { seededRandom } from '../support/seeded.ts';

let root: string;
let generated: InputFile;

/** Random lines: words, blank lines, white-space-only lines, CRLF endings, multi-byte text;
 *  the last line has no newline. */
function generateCorpus(lineCount: number, seed: number): string {
  const random = seededRandom(seed);
  const words = ['quay', 'tide', 'ferry', 'gull', 'rope', 'ébène', 'мост', '港', '🦀', 'x'];
  const lines: string[] = [];
  for (let i = 0; i < lineCount; i++) {
    const kind = random();
    if (kind < 0.08) lines.push('');
    else if (kind < 0.12) lines.push(' \t ');
    else {
      const length = 1 + Math.floor(random() * 12);
      const line = Array.from({ length }, () => words[Math.floor(random() * words.length)]).join(' ');
      lines.push(random() < 0.3 ? `${line}\r` : line);
    }
  }
  return lines.join('\n') + '\nthe final line has no newline';
}

const textOptions: ReadOptions = { format: 'text', textField: undefined, skipBad: false };

async function readAll(file: InputFile, chunks: Chunk[]) {
  const sentences: string[] = [];
  const totals = { bytesRead: 0, lines: 0, sentences: 0, emptyLines: 0 };
  for (const chunk of chunks) {
    const stats = await readChunk(file, chunk, textOptions, (s) => sentences.push(s));
    totals.bytesRead += stats.bytesRead;
    totals.lines += stats.lines;
    totals.sentences += stats.sentences;
    totals.emptyLines += stats.emptyLines;
  }
  return { sentences, totals };
}

beforeAll(async () => {
  root = mkdtempSync(path.join(tmpdir(), 'quern-plan-'));
  writeFileSync(path.join(root, 'corpus.txt'), generateCorpus(800, 7));
  [generated] = await discoverInputs([path.join(root, 'corpus.txt')], {});
});

afterAll(() => rmSync(root, { recursive: true, force: true }));

describe('planChunks', () => {
  test.each([1, 7, 64, 1000, 20_000, 1 << 20])('chunks of about %i bytes cover the file exactly, line-aligned', async (target) => {
    const bytes = readFileSync(generated.path);
    const chunks = await planChunks([generated], target);
    expect(chunks.map((c) => c.index)).toEqual(chunks.map((_, i) => i));
    expect(chunks[0].byteStart).toBe(0);
    expect(chunks.at(-1)!.byteEnd).toBe(bytes.length);
    for (let i = 0; i < chunks.length; i++) {
      const { byteStart, byteEnd, fileIndex } = chunks[i];
      expect(fileIndex).toBe(0);
      expect(byteEnd).toBeGreaterThan(byteStart);
      if (i > 0) expect(byteStart).toBe(chunks[i - 1].byteEnd);
      if (byteStart > 0) expect(bytes[byteStart - 1]).toBe(0x0a);
      if (byteEnd < bytes.length) expect(bytes[byteEnd - 1]).toBe(0x0a);
      // No earlier newline could have ended the chunk once the target was reached.
      if (byteEnd < bytes.length) expect(bytes.subarray(byteStart + target - 1, byteEnd - 1).includes(0x0a)).toBe(false);
    }
    expect(await planChunks([generated], target)).toEqual(chunks);
  });

  test.each([1, 333, 4096, 1 << 20])('reading chunks of %i bytes one after another equals reading the whole file', async (target) => {
    const whole = await readAll(generated, [{ index: 0, fileIndex: 0, byteStart: 0, byteEnd: generated.bytes }]);
    const split = await readAll(generated, await planChunks([generated], target));
    expect(split.sentences).toEqual(whole.sentences);
    expect(split.totals).toEqual(whole.totals);
    expect(whole.totals.lines).toBe(801);
    expect(whole.totals.bytesRead).toBe(generated.bytes);
    expect(whole.totals.lines).toBe(whole.totals.sentences + whole.totals.emptyLines);
    expect(whole.sentences.at(-1)).toBe('the final line has no newline');
    expect(whole.sentences.some((s) => s.endsWith('\r'))).toBe(false);
  });

  test('gzip inputs are one chunk, empty files one empty chunk; indexes run across files', async () => {
    writeFileSync(path.join(root, 'a-empty.txt'), '');
    writeFileSync(path.join(root, 'b-zipped.txt'), gzipSync('one\ntwo\n'.repeat(5000)));
    const files = await discoverInputs([path.join(root, 'a-empty.txt'), path.join(root, 'b-zipped.txt'), generated.path], {});
    const chunks = await planChunks(files, 10_000);
    expect(chunks[0]).toEqual({ index: 0, fileIndex: 0, byteStart: 0, byteEnd: 0 });
    expect(chunks[1]).toEqual({ index: 1, fileIndex: 1, byteStart: 0, byteEnd: files[1].bytes });
    expect(chunks.slice(2).every((c) => c.fileIndex === 2)).toBe(true);
    expect(chunks.length).toBeGreaterThan(3);
    expect(chunks.map((c) => c.index)).toEqual(chunks.map((_, i) => i));
  });

  test('rejects a bad target and a file that changed since discovery', async () => {
    await expect(planChunks([generated], 0)).rejects.toMatchObject({ code: 'config' });
    await expect(planChunks([generated], 1.5)).rejects.toMatchObject({ code: 'config' });
    const changing = path.join(root, 'changing.txt');
    writeFileSync(changing, 'one\n');
    const [file] = await discoverInputs([changing], {});
    writeFileSync(changing, 'one\ntwo\n');
    await expect(planChunks([file], 100)).rejects.toMatchObject({ code: 'input', message: expect.stringContaining('changed') });
  });
});
