/**
 * Token files (src/count/token-file.ts): the vocabulary pass's tokens, kept for the count pass.
 * They only save time: a count that uses them, one that does not, and one whose token files were
 * damaged or removed before the count pass must give the same store, byte for byte.
 */
import { existsSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { describe, expect, it } from 'vitest';
import { newTokenBlock, type TokenBlock } from '../../src/corpus/byte-tokenizer.ts';
import { readTokenFile, tokenFileIntact, tokenFilePath, TokenFileWriter, TOKENS_DIR, type TokenFileBlock } from '../../src/count/token-file.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import type { ProgressSink } from '../../src/job/context.ts';
import { readManifest } from '../../src/job/manifest.ts';
import { runCount } from '../../src/job/pipeline.ts';
import { storeDigest } from '../../src/merge/digest.ts';
import { PARTITIONS_DEFAULT } from '../../src/limits.ts';
import { REPO, tempDir } from '../support/cli.ts';

function blockOf(sentences: number[][]): TokenBlock {
  const block = newTokenBlock();
  for (const sentence of sentences) {
    for (const entry of sentence) block.entries[block.tokens++] = entry;
    block.sentenceEnds[block.sentences++] = block.tokens;
  }
  return block;
}

async function writeFile(jobDir: string, chunk: number, blocks: TokenBlock[]) {
  const writer = await TokenFileWriter.open(nodeFs, jobDir, chunk, 7);
  for (const block of blocks) await writer.append(block);
  return writer.finish();
}

async function readBack(jobDir: string, chunk: number): Promise<number[][][]> {
  const blocks: number[][][] = [];
  await readTokenFile(jobDir, chunk, (block: TokenFileBlock) => {
    const sentences: number[][] = [];
    let start = 0;
    for (let s = 0; s < block.sentences; s++) {
      sentences.push(Array.from(block.entries.subarray(start, block.sentenceEnds[s])));
      start = block.sentenceEnds[s];
    }
    blocks.push(sentences);
  });
  return blocks;
}

describe('token file', () => {
  it('reads back the blocks written, and is intact only as recorded', async () => {
    const jobDir = tempDir('quern-tokens-');
    await nodeFs.mkdir(path.join(jobDir, TOKENS_DIR));
    const written = [[[3, 4, 5], [], [6]], [[7, 7, 7, 7]]];
    const record = await writeFile(jobDir, 2, written.map(blockOf));
    expect(record.table).toBe(7);
    const file = path.join(jobDir, tokenFilePath(2));
    expect(record.bytes).toBe(readFileSync(file).length);
    expect(await readBack(jobDir, 2)).toEqual(written);
    expect(await tokenFileIntact(jobDir, 2, record)).toBe(true);

    expect(await tokenFileIntact(jobDir, 3, record)).toBe(false); // no such file
    expect(await tokenFileIntact(jobDir, 2, { ...record, table: 8 })).toBe(false); // another table's
    const bytes = readFileSync(file);
    bytes[bytes.length - 3] ^= 0x01;
    writeFileSync(file, bytes);
    expect(await tokenFileIntact(jobDir, 2, record)).toBe(false); // a flipped bit
    writeFileSync(file, bytes.subarray(0, bytes.length - 4));
    expect(await tokenFileIntact(jobDir, 2, record)).toBe(false); // truncated
    expect(readdirSync(path.join(jobDir, TOKENS_DIR))).toEqual(['c2.tok']); // no temporaries left
  });
});

describe('a count with token files', () => {
  const inputs = [path.join(REPO, 'sample-data/logbook'), path.join(REPO, 'sample-data/dispatch.jsonl')];

  async function count(jobDir: string, tokenFiles: boolean, beforeCount?: (jobDir: string) => void): Promise<string> {
    let countStarted = false;
    const progress: ProgressSink = {
      start(label) {
        if (!countStarted && label.startsWith('counting')) {
          countStarted = true;
          beforeCount?.(jobDir);
        }
      },
      update() {},
      stop() {},
    };
    await runCount({
      jobDir, inputSpecs: inputs, workers: 2, memoryBytes: 256 << 20, restart: false, tokenFiles, progress,
      config: {
        order: 3, partitions: PARTITIONS_DEFAULT, normalize: { lowercase: true, unicode: 'nfc', split: 'space' }, format: 'auto',
        textField: 'body.text', skipBad: false, vocabCap: {}, chunkBytes: 64 << 10,
      },
    });
    expect(existsSync(path.join(jobDir, TOKENS_DIR))).toBe(false);
    expect((await readManifest(jobDir))!.stages.vocab.tokens).toBeUndefined();
    return storeDigest(jobDir, 3, PARTITIONS_DEFAULT);
  }

  it('gives the same store as a count from the text, also when token files are damaged or missing', async () => {
    const dir = tempDir('quern-tokens-job-');
    const fromText = await count(path.join(dir, 'text'), false);
    let seen: string[] = [];
    const fromTokens = await count(path.join(dir, 'tokens'), true, (jobDir) => {
      seen = readdirSync(path.join(jobDir, TOKENS_DIR));
    });
    // A token file per chunk (text, gzip and JSONL chunks) and a map per vocabulary worker.
    const manifest = (await readManifest(path.join(dir, 'tokens')))!;
    expect(seen.filter((f) => f.endsWith('.tok'))).toHaveLength(manifest.chunks.length);
    expect(seen.filter((f) => f.endsWith('.map')).length).toBeGreaterThanOrEqual(1);
    expect(fromTokens).toBe(fromText);
    expect(manifest.stages.count.chunks.every((c) => c.fromTokenFile === true)).toBe(true);
    expect((await readManifest(path.join(dir, 'text')))!.stages.count.chunks.some((c) => c.fromTokenFile)).toBe(false);

    const damaged = await count(path.join(dir, 'damaged'), true, (jobDir) => {
      const files = readdirSync(path.join(jobDir, TOKENS_DIR)).filter((f) => f.endsWith('.tok')).sort();
      expect(files.length).toBeGreaterThanOrEqual(3);
      const flipped = path.join(jobDir, TOKENS_DIR, files[0]);
      const bytes = readFileSync(flipped);
      bytes[bytes.length >> 1] ^= 0x40;
      writeFileSync(flipped, bytes);
      rmSync(path.join(jobDir, TOKENS_DIR, files[1]));
      writeFileSync(path.join(jobDir, TOKENS_DIR, files[2]), readFileSync(path.join(jobDir, TOKENS_DIR, files[2])).subarray(0, 20));
    });
    expect(damaged).toBe(fromText);
    const chunks = (await readManifest(path.join(dir, 'damaged')))!.stages.count.chunks;
    expect(chunks.filter((c) => !c.fromTokenFile)).toHaveLength(3);
  });
});
