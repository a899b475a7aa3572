/**
 * Standard input as an input: gzip told by its first two bytes however the stream delivers them,
 * every byte handed on after the look (put back, or kept when the stream ended that soon), `-` at
 * most once. Real streams of given blocks stand for the pipe (the CLI itself: test/cli/score-stdin.test.ts).
 */
import { Readable } from 'node:stream';
import { gzipSync } from 'node:zlib';
import { describe, expect, test } from 'vitest';
import { openStdin, splitStdinSpec } from '../../src/corpus/stdin.ts';
import { QuernError } from '../../src/errors.ts';

/** A paused stream that gives `blocks` one by one, then ends (or fails with `failure`). */
function streamOf(blocks: Buffer[], failure?: Error): Readable {
  return Readable.from((async function* () {
    for (const block of blocks) {
      await new Promise((resolve) => setImmediate(resolve));
      yield block;
    }
    if (failure !== undefined) throw failure;
  })(), { objectMode: false });
}

async function readAll(stream: Readable): Promise<Buffer> {
  const blocks: Buffer[] = [];
  for await (const block of stream) blocks.push(block as Buffer);
  return Buffer.concat(blocks);
}

describe('openStdin', () => {
  const zipped = gzipSync('one line\nanother line\n'.repeat(50));

  test.each([
    ['gzip in one block', [zipped], true],
    ['gzip, its magic bytes in two blocks', [zipped.subarray(0, 1), zipped.subarray(1, 2), zipped.subarray(2)], true],
    ['text', [Buffer.from('\x1ftext that starts like gzip but is not\n'), Buffer.from('more\n')], false],
    ['one byte', [Buffer.from('x')], false],
    ['the gzip magic alone', [zipped.subarray(0, 2)], true],
    ['nothing', [], false],
  ] as const)('%s: gzip %s, and every byte handed on', async (_name, blocks, gzip) => {
    const { input, source } = await openStdin('text', streamOf([...blocks]));
    expect(input).toMatchObject({ path: '-', stdin: true, gzip, format: 'text' });
    expect((await readAll(source)).equals(Buffer.concat([...blocks]))).toBe(true);
  });

  test('a stream that fails before two bytes: an io error naming standard input', async () => {
    const error = await openStdin('jsonl', streamOf([Buffer.from('{')], new Error('EIO: i/o error'))).catch((e) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect(error).toMatchObject({ code: 'io', message: 'cannot read standard input: EIO: i/o error' });
  });
});

describe('splitStdinSpec', () => {
  test('takes - out of the specs, once; twice is a config error', () => {
    expect(splitStdinSpec(['a.txt', '-', 'dir/'])).toEqual({ stdin: true, files: ['a.txt', 'dir/'] });
    expect(splitStdinSpec(['a.txt'])).toEqual({ stdin: false, files: ['a.txt'] });
    expect(() => splitStdinSpec(['-', 'a.txt', '-'])).toThrow(expect.objectContaining({ code: 'config', message: expect.stringContaining('can be read only once') }));
  });
});
