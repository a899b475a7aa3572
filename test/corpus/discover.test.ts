import { mkdirSync, mkdtempSync, rmSync, symlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import * as path from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { discoverInputs, formatFromName } from '../../src/corpus/discover.ts';
import { QuernError } from '../../src/errors.ts';
import { FINGERPRINT_EDGE_BYTES } from '../../src/limits.ts';

let root: string;

function put(relative: string, data: string | Uint8Array): string {
  const filePath = path.join(root, relative);
  mkdirSync(path.dirname(filePath), { recursive: true });
  writeFileSync(filePath, data);
  return filePath;
}

beforeAll(() => {
  root = mkdtempSync(path.join(tmpdir(), 'quern-discover-'));
  put('shards/b.txt', 'b\n');
  put('shards/a.txt', 'a\n');
  put('shards/deep/c.jsonl', '{"t":"c"}\n');
  put('shards/deep/d.ndjson', '{"t":"d"}\n');
  put('shards/.hidden.txt', 'hidden\n');
  put('shards/.cache/e.txt', 'hidden dir\n');
  put('shards/looks-plain.txt', gzipSync('zipped\n')); // gzip despite its name
  put('shards/looks-zipped.gz', 'plain\n'); // plain despite its name
  put('shards/f.jsonl.gz', gzipSync('{"t":"f"}\n'));
  mkdirSync(path.join(root, 'empty'));
});

afterAll(() => rmSync(root, { recursive: true, force: true }));

const rel = (files: Array<{ path: string }>): string[] => files.map((f) => path.relative(root, f.path));

describe('discoverInputs', () => {
  test('walks directories recursively, skips dotfiles, sorts by absolute path', async () => {
    const files = await discoverInputs([path.join(root, 'shards')], {});
    expect(rel(files)).toEqual([
      'shards/a.txt',
      'shards/b.txt',
      'shards/deep/c.jsonl',
      'shards/deep/d.ndjson',
      'shards/f.jsonl.gz',
      'shards/looks-plain.txt',
      'shards/looks-zipped.gz',
    ]);
    for (const file of files) expect(path.isAbsolute(file.path)).toBe(true);
  });

  test('detects gzip by magic bytes, not by name; takes the format from the name', async () => {
    const files = await discoverInputs([path.join(root, 'shards')], {});
    const byName = new Map(files.map((f) => [path.basename(f.path), f]));
    expect(byName.get('looks-plain.txt')).toMatchObject({ gzip: true, format: 'text' });
    expect(byName.get('looks-zipped.gz')).toMatchObject({ gzip: false, format: 'text' });
    expect(byName.get('f.jsonl.gz')).toMatchObject({ gzip: true, format: 'jsonl' });
    expect(byName.get('c.jsonl')).toMatchObject({ gzip: false, format: 'jsonl', bytes: 10 });
    expect(byName.get('d.ndjson')?.format).toBe('jsonl');
    expect(formatFromName('/x/SHARD.JSONL')).toBe('jsonl');
  });

  test('an explicit format wins over the name', async () => {
    const files = await discoverInputs([path.join(root, 'shards/deep')], { format: 'text' });
    expect(files.map((f) => f.format)).toEqual(['text', 'text']);
  });

  test('expands glob patterns and de-duplicates overlapping specs', async () => {
    const files = await discoverInputs(
      [path.join(root, 'shards/**/*.txt'), path.join(root, 'shards/a.txt'), path.join(root, 'shards')],
      {},
    );
    expect(rel(files).filter((p) => p.endsWith('.txt'))).toEqual(['shards/a.txt', 'shards/b.txt', 'shards/looks-plain.txt']);
    expect(new Set(files.map((f) => f.path)).size).toBe(files.length);
    const globbed = await discoverInputs([path.join(root, 'shards/*.{txt,gz}')], {});
    expect(rel(globbed)).toEqual(['shards/a.txt', 'shards/b.txt', 'shards/f.jsonl.gz', 'shards/looks-plain.txt', 'shards/looks-zipped.gz']);
  });

  test('a spec that matches nothing is an input error naming it', async () => {
    for (const spec of [path.join(root, 'missing.txt'), path.join(root, 'shards/*.csv'), path.join(root, 'empty')]) {
      const error = await discoverInputs([spec], {}).catch((e: unknown) => e);
      expect(error).toBeInstanceOf(QuernError);
      expect(error).toMatchObject({ code: 'input', message: `no input matches ${spec}` });
    }
    await expect(discoverInputs([], {})).rejects.toMatchObject({ code: 'config' });
  });

  test('an unreadable path is an io error naming it', async () => {
    const loop = path.join(root, 'loop');
    symlinkSync(path.join(root, 'loop2'), loop);
    symlinkSync(loop, path.join(root, 'loop2'));
    const error = await discoverInputs([loop], {}).catch((e: unknown) => e);
    expect(error).toMatchObject({ code: 'io' });
    expect((error as Error).message).toContain(loop);
  });

  test('the fingerprint covers the size and both ends', async () => {
    const big = Buffer.alloc(3 * FINGERPRINT_EDGE_BYTES, 'x');
    const base = put('fp/base.txt', big);
    const same = put('fp/same.txt', big);
    const middle = Buffer.from(big);
    middle[Math.floor(big.length / 2)] = 0x79; // outside both edges: not seen, by design
    const tail = Buffer.from(big);
    tail[big.length - 1] = 0x79;
    const head = Buffer.from(big);
    head[0] = 0x79;
    put('fp/middle.txt', middle);
    put('fp/tail.txt', tail);
    put('fp/head.txt', head);
    put('fp/longer.txt', Buffer.concat([big, Buffer.from('x')]));
    const files = await discoverInputs([path.join(root, 'fp')], {});
    const fp = new Map(files.map((f) => [path.basename(f.path), f.fingerprint]));
    expect(fp.get('base.txt')).toMatch(/^[0-9a-f]{64}$/);
    expect(fp.get('same.txt')).toBe(fp.get('base.txt'));
    expect(fp.get('middle.txt')).toBe(fp.get('base.txt'));
    expect(new Set([fp.get('base.txt'), fp.get('tail.txt'), fp.get('head.txt'), fp.get('longer.txt')]).size).toBe(4);
    expect(files.find((f) => f.path === base)?.bytes).toBe(big.length);
    expect(same).toBeDefined();
  });
});
