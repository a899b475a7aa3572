/**
 * Estimate result files (docs/estimate-files.md): rows and values read back as written; every
 * damage — a flipped byte anywhere, a truncated or extended file — is a 'corrupt' QuernError naming
 * the file, never a crash, a hang or wrong values. And materialiseModel reads a source back into the
 * model it came from.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { materialiseModel, modelSource } from '../../src/estimate/model-source.ts';
import { ResultReader, ResultWriter, type ResultMeta } from '../../src/estimate/result-file.ts';
import { nodeFs, writeFileThrough } from '../../src/job/fsio.ts';
import { RESULT_BLOCK_ROWS } from '../../src/limits.ts';
import { seededRandom } from '../support/seeded.ts';
import { tempDir } from '../support/cli.ts';
import { countsOf, estimateWith, markovCorpus } from './support.ts';
import { expectSameModel } from './stream-support.ts';

/** `rows` random distinct sorted rows of `order` ids with random values (−∞ among them). */
function randomRows(seed: number, rows: number, order: number): { ids: Uint32Array; values: Float64Array } {
  const random = seededRandom(seed);
  const ids = new Uint32Array(rows * order);
  const row = new Array<number>(order).fill(0);
  for (let r = 0; r < rows; r++) {
    // The next row: bump one position (often the last), reset the ids after it to random values.
    const position = random() < 0.7 ? order - 1 : Math.floor(random() * order);
    row[position] += 1 + Math.floor(random() * (random() < 0.1 ? 100_000 : 5));
    for (let j = position + 1; j < order; j++) row[j] = Math.floor(random() * 1000);
    for (let j = 0; j < order; j++) ids[r * order + j] = row[j];
  }
  const values = Float64Array.from({ length: rows }, (_, r) => (r % 997 === 5 ? -Infinity : -10 * random()));
  return { ids, values };
}

async function writeRows(file: string, meta: ResultMeta, ids: Uint32Array, values: Float64Array): Promise<{ rows: number; bytes: number }> {
  let written = { rows: 0, bytes: 0 };
  await writeFileThrough(nodeFs, file, async (out) => {
    const writer = new ResultWriter(out, meta);
    for (let r = 0; r < values.length; r++) {
      writer.add(ids, r * meta.order, values[r]);
      if (writer.pendingByteCount > 100_000) await writer.drain();
    }
    written = await writer.finish();
  });
  return written;
}

async function readAll(file: string, meta: ResultMeta, expected?: { rows: number; bytes: number }): Promise<{ ids: number[]; values: number[] }> {
  const reader = await ResultReader.open(file, meta, expected);
  const ids: number[] = [];
  const values: number[] = [];
  for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
    ids.push(...batch.ids);
    values.push(...batch.values);
  }
  return { ids, values };
}

describe('estimate result files', () => {
  test.each([1, 3, 5])('order %i: rows and values read back exactly, across block boundaries', async (order) => {
    const file = path.join(tempDir(), 'o.prob');
    const meta: ResultMeta = { kind: 'probabilities', order, partition: 3 };
    const rows = 2 * RESULT_BLOCK_ROWS + 17;
    const { ids, values } = randomRows(order, rows, order);
    const written = await writeRows(file, meta, ids, values);
    expect(written.rows).toBe(rows);
    const read = await readAll(file, meta, written);
    expect(read.ids).toEqual(Array.from(ids));
    expect(read.values).toEqual(Array.from(values));
  });

  test('an empty file (no rows) reads back empty', async () => {
    const file = path.join(tempDir(), 'o.bow');
    const meta: ResultMeta = { kind: 'back-off', order: 2, partition: 0 };
    const written = await writeRows(file, meta, new Uint32Array(0), new Float64Array(0));
    expect(written).toEqual({ rows: 0, bytes: 96 });
    expect((await readAll(file, meta, written)).values).toEqual([]);
  });

  test('the writer refuses rows out of order, within a block and across blocks, when it encodes them (an assertion: a programmer error)', async () => {
    const file = path.join(tempDir(), 'o.prob');
    await expect(writeFileThrough(nodeFs, file, async (out) => {
      const writer = new ResultWriter(out, { kind: 'probabilities', order: 2, partition: 0 });
      writer.add(Uint32Array.of(1, 5), 0, -1);
      writer.add(Uint32Array.of(1, 5), 0, -1);
      await writer.finish();
    })).rejects.toThrow(/strictly increase/);
    await expect(writeFileThrough(nodeFs, file, async (out) => {
      const writer = new ResultWriter(out, { kind: 'probabilities', order: 2, partition: 0 });
      for (let i = 0; i < RESULT_BLOCK_ROWS; i++) writer.add(Uint32Array.of(1, i + 1), 0, -1);
      writer.add(Uint32Array.of(0, 9), 0, -1); // below the previous block's last row
      await writer.finish();
    })).rejects.toThrow(/strictly increase/);
  });

  test('every flipped byte, a truncation and an extension are reported as corrupt, naming the file', async () => {
    const file = path.join(tempDir(), 'o.prob');
    const meta: ResultMeta = { kind: 'probabilities', order: 3, partition: 1 };
    const { ids, values } = randomRows(7, 300, 3);
    const written = await writeRows(file, meta, ids, values);
    const good = readFileSync(file);
    const damaged: Buffer[] = [];
    for (let offset = 0; offset < good.length; offset++) {
      const bytes = Buffer.from(good);
      bytes[offset] ^= 1 << (offset % 8);
      damaged.push(bytes);
    }
    damaged.push(good.subarray(0, good.length - 1), good.subarray(0, good.length - 40), Buffer.concat([good, Buffer.alloc(8)]));
    for (const bytes of damaged) {
      writeFileSync(file, bytes);
      // With the job.json record (rows, bytes) and without it: both catch every damage.
      for (const expected of [written, undefined]) {
        const error = await readAll(file, meta, expected).catch((e: unknown) => e);
        if (!(error instanceof QuernError && error.code === 'corrupt' && error.message.includes(file))) {
          throw new Error(`damage not reported as corrupt: ${String(error)}`);
        }
      }
    }
    writeFileSync(file, good);
    const wrongMeta = await readAll(file, { ...meta, partition: 2 }).catch((e: unknown) => e);
    expect((wrongMeta as QuernError).code).toBe('corrupt');
  }, 30_000);

  test('a damaged block closes the reader, and every later call throws the same error', async () => {
    const file = path.join(tempDir(), 'o.prob');
    const meta: ResultMeta = { kind: 'probabilities', order: 2, partition: 0 };
    const { ids, values } = randomRows(11, 5000, 2);
    await writeRows(file, meta, ids, values);
    const bytes = readFileSync(file);
    bytes[bytes.length >> 1] ^= 0x10; // inside a block past the first
    writeFileSync(file, bytes);
    const reader = await ResultReader.open(file, meta);
    let first: unknown;
    try {
      for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch());
    } catch (error) {
      first = error;
    }
    expect(first).toBeInstanceOf(QuernError);
    expect((first as QuernError).code).toBe('corrupt');
    await expect(reader.nextBatch()).rejects.toBe(first);
    await reader.close(); // closing again is harmless
  });
});

test('materialiseModel reads an in-memory model\'s source back into the same model', async () => {
  const sentences = markovCorpus(5, 300, 40, 10);
  for (const method of ['modified-kneser-ney', 'katz'] as const) {
    const model = estimateWith(method, countsOf(sentences, 4), []);
    expectSameModel(await materialiseModel(modelSource(model)), model, 0);
  }
});
