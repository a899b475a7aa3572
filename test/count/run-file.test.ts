import { promises as fsp } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { crc32 } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { faultyFs, nodeFs } from '../../src/job/fsio.ts';
import { RUN_BLOCK_RECORDS_MAX, RUN_COUNT_MAX, RUN_READ_BUFFER_BYTES } from '../../src/limits.ts';
import {
  RUN_FORMAT_VERSION,
  RUN_HEADER_BYTES,
  RUN_TRAILER_BYTES,
  RunReader,
  writeRunFile,
  writeRunFileFrom,
  type RunBatch,
  type RunMeta,
} from '../../src/count/run-file.ts';
import { seededRandom } from '../support/seeded.ts';
import { setCodecEngine } from '../../src/count/codec-wasm.ts';

// ---- Helpers -----------------------------------------------------------------------------------

const prng = seededRandom;

interface Run {
  keys: Uint32Array;
  counts: Float64Array;
  recordCount: number;
}

/** Sorted distinct n-grams from `draws` random tuples; `id` draws one word id. */
function randomRun(order: number, draws: number, id: () => number, count: () => number): Run {
  const raw = new Uint32Array(draws * order);
  for (let i = 0; i < raw.length; i++) raw[i] = id();
  const index = Array.from({ length: draws }, (_, i) => i);
  const cmp = (a: number, b: number): number => {
    for (let j = 0; j < order; j++) {
      const d = raw[a * order + j] - raw[b * order + j];
      if (d !== 0) return d;
    }
    return 0;
  };
  index.sort(cmp);
  const keys = new Uint32Array(draws * order);
  const counts = new Float64Array(draws);
  let m = 0;
  for (let i = 0; i < draws; i++) {
    if (i > 0 && cmp(index[i], index[i - 1]) === 0) continue;
    keys.set(raw.subarray(index[i] * order, index[i] * order + order), m * order);
    counts[m] = count();
    m++;
  }
  return { keys: keys.slice(0, m * order), counts: counts.slice(0, m), recordCount: m };
}

/** Ids ranked by frequency: mostly small, some up to `idMax`. */
function zipfIds(random: () => number, idMax: number): () => number {
  return () => Math.min(idMax, Math.floor(Math.exp(random() * Math.log(idMax + 1))) - 1);
}

/** Typed arrays of the same type with equal bytes (fast, unlike a deep equality over elements). */
function sameBytes(a: Uint32Array | Float64Array, b: Uint32Array | Float64Array): boolean {
  return a.constructor === b.constructor && Buffer.from(a.buffer, a.byteOffset, a.byteLength).equals(Buffer.from(b.buffer, b.byteOffset, b.byteLength));
}

async function readAll(filePath: string): Promise<{ reader: RunReader; run: Run; batchSizes: number[] }> {
  const reader = await RunReader.open(filePath);
  const order = reader.info.order;
  const keys: number[] = [];
  const counts: number[] = [];
  const batchSizes: number[] = [];
  for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
    expect(batch.keys.length).toBe(batch.recordCount * order);
    expect(batch.counts.length).toBe(batch.recordCount);
    batchSizes.push(batch.recordCount);
    for (const id of batch.keys) keys.push(id);
    for (const c of batch.counts) counts.push(c);
  }
  return { reader, run: { keys: Uint32Array.from(keys), counts: Float64Array.from(counts), recordCount: counts.length }, batchSizes };
}

/** Reads a whole file; returns the error it raised, or undefined when it read cleanly. */
async function readError(filePath: string): Promise<unknown> {
  try {
    await readAll(filePath);
    return undefined;
  } catch (error) {
    return error;
  }
}

function expectCorrupt(error: unknown, what: string): void {
  if (!(error instanceof QuernError) || error.code !== 'corrupt') {
    throw new Error(`${what}: expected QuernError 'corrupt', got ${error instanceof Error ? `${error.name}: ${error.message}` : String(error)}`);
  }
}

let dir: string;
beforeAll(async () => {
  dir = await fsp.mkdtemp(path.join(os.tmpdir(), 'quern-run-file-'));
});
afterAll(async () => {
  await fsp.rm(dir, { recursive: true, force: true });
});

const meta = (order: number, extra: Partial<RunMeta> = {}): RunMeta => ({ order, partition: 3, chunk: 17, spill: 2, ...extra });

// ---- Round trip ---------------------------------------------------------------------------------

describe('run file round trip', () => {
  const B = RUN_BLOCK_RECORDS_MAX;
  const cases: { name: string; order: number; draws: number; seed: number; ids: 'zipf' | 'high' | 'mixed'; counts: 'small' | 'large' }[] = [];
  for (let order = 1; order <= 7; order++) {
    cases.push({ name: `order ${order}, several blocks`, order, draws: order === 1 ? 3 * B : 2 * B + 777, seed: order, ids: 'mixed', counts: 'small' });
  }
  cases.push({ name: 'order 3, one record', order: 3, draws: 1, seed: 11, ids: 'zipf', counts: 'small' });
  cases.push({ name: 'order 2, ids near 2^32−1', order: 2, draws: 5000, seed: 12, ids: 'high', counts: 'large' });
  cases.push({ name: 'order 5, exactly one full block', order: 5, draws: B, seed: 13, ids: 'high', counts: 'small' });

  for (const c of cases) {
    it(c.name, async () => {
      const random = prng(c.seed);
      const zipf = zipfIds(random, 200_000);
      const high = (): number => 0xffff_ffff - Math.floor(random() * 300);
      const id = c.ids === 'zipf' ? zipf : c.ids === 'high' ? high : (): number => (random() < 0.1 ? high() : zipf());
      const count = c.counts === 'small' ? (): number => 1 + Math.floor(random() ** 4 * 1000) : (): number => 1 + Math.floor(random() * 2 ** 40);
      const run = randomRun(c.order, c.draws, id, count);
      const filePath = path.join(dir, `rt-${c.order}-${c.seed}.run`);
      const info = await writeRunFile(nodeFs, filePath, meta(c.order), run.keys, run.counts, run.recordCount);
      const expectedSum = run.counts.reduce((a, b) => a + b, 0);
      expect(info).toMatchObject({ order: c.order, partition: 3, chunk: 17, spill: 2, recordCount: run.recordCount, countSum: expectedSum });
      expect(info.blockCount).toBe(Math.ceil(run.recordCount / B));
      expect(info.fileBytes).toBe((await fsp.stat(filePath)).size);
      expect(await temporaryFiles(filePath)).toEqual([]);

      const { reader, run: back, batchSizes } = await readAll(filePath);
      expect(reader.info).toEqual({ ...info, formatVersion: RUN_FORMAT_VERSION });
      expect(back.recordCount).toBe(run.recordCount);
      expect(sameBytes(back.keys, run.keys), 'keys').toBe(true);
      expect(sameBytes(back.counts, run.counts), 'counts').toBe(true);
      expect(batchSizes.slice(0, -1).every((size) => size === B)).toBe(true);
      expect(await reader.nextBatch()).toBeNull();
    });
  }

  it('an empty run', async () => {
    const filePath = path.join(dir, 'empty.run');
    const info = await writeRunFile(nodeFs, filePath, meta(4), new Uint32Array(0), [], 0);
    expect(info).toMatchObject({ recordCount: 0, countSum: 0, blockCount: 0, fileBytes: RUN_HEADER_BYTES + RUN_TRAILER_BYTES });
    const { run, batchSizes } = await readAll(filePath);
    expect(run.recordCount).toBe(0);
    expect(batchSizes).toEqual([]);
  });

  it('counts up to 2^53 − 1 and a Uint32Array of counts', async () => {
    const filePath = path.join(dir, 'big-counts.run');
    const keys = Uint32Array.from([0, 0, 0, 1, 0, 0xffff_ffff, 0xffff_fffe, 0xffff_ffff, 0xffff_ffff, 0xffff_ffff]);
    const counts = [RUN_COUNT_MAX - 4 - 2 ** 32, 1, 2 ** 32, 2, 1];
    const info = await writeRunFile(nodeFs, filePath, meta(2), keys, counts, 5);
    expect(info.countSum).toBe(RUN_COUNT_MAX);
    const { run } = await readAll(filePath);
    expect(Array.from(run.keys)).toEqual(Array.from(keys));
    expect(Array.from(run.counts)).toEqual(counts);

    const filePath32 = path.join(dir, 'u32-counts.run');
    const counts32 = Uint32Array.from([0xffff_ffff, 1, 7, 128, 16384]);
    await writeRunFile(nodeFs, filePath32, meta(2), keys, counts32, 5);
    expect(Array.from((await readAll(filePath32)).run.counts)).toEqual(Array.from(counts32));
  });

  it('reads through a buffer no larger than RUN_READ_BUFFER_BYTES', async () => {
    const random = prng(99);
    const run = randomRun(7, 40_000, () => Math.floor(random() * 2 ** 32), () => 1 + Math.floor(random() * 2 ** 30));
    const filePath = path.join(dir, 'large.run');
    const info = await writeRunFile(nodeFs, filePath, meta(7), run.keys, run.counts, run.recordCount);
    expect(info.fileBytes).toBeGreaterThan(2 * RUN_READ_BUFFER_BYTES);
    const reader = await RunReader.open(filePath);
    expect((reader as unknown as { buffer: Buffer }).buffer.length).toBeLessThanOrEqual(RUN_READ_BUFFER_BYTES);
    let records = 0;
    for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) records += batch.recordCount;
    expect(records).toBe(run.recordCount);
  });

  it('with reuseBatches, decodes every block into the same arrays, with the records of a fresh read', async () => {
    const random = prng(7);
    const run = randomRun(4, 30_000, zipfIds(random, 50_000), () => 1 + Math.floor(random() * 9));
    const filePath = path.join(dir, 'reused.run');
    await writeRunFile(nodeFs, filePath, meta(4), run.keys, run.counts, run.recordCount);
    const fresh = (await readAll(filePath)).run;
    expect(fresh.recordCount % RUN_BLOCK_RECORDS_MAX).not.toBe(0);
    const reader = await RunReader.open(filePath, { reuseBatches: true });
    const keys: number[] = [];
    const counts: number[] = [];
    const arrays = new Set<Uint32Array>();
    let batches = 0;
    for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
      batches++;
      arrays.add(batch.keys);
      // Only the batch's rows count: the last block's may be fewer than the arrays hold.
      keys.push(...batch.keys.subarray(0, batch.recordCount * 4));
      counts.push(...batch.counts.subarray(0, batch.recordCount));
    }
    expect(batches).toBe(Math.ceil(fresh.recordCount / RUN_BLOCK_RECORDS_MAX));
    expect(batches).toBeGreaterThan(2);
    expect(arrays.size).toBe(1);
    expect(sameBytes(Uint32Array.from(keys), fresh.keys)).toBe(true);
    expect(sameBytes(Float64Array.from(counts), fresh.counts)).toBe(true);
  });
});

// ---- Writer checks and failures -----------------------------------------------------------------

describe('writeRunFile', () => {
  const keys = Uint32Array.from([1, 2, 1, 3, 2, 0]);
  const bad: { name: string; keys: Uint32Array; counts: number[]; order?: number; partition?: number; pattern: RegExp }[] = [
    { name: 'rows out of order', keys: Uint32Array.from([1, 2, 2, 0, 1, 3]), counts: [1, 1, 1], pattern: /strictly increase: record 2/ },
    { name: 'a duplicate row', keys: Uint32Array.from([1, 2, 1, 2, 2, 0]), counts: [1, 1, 1], pattern: /strictly increase: record 1/ },
    { name: 'a zero count', keys, counts: [1, 0, 1], pattern: /count 0 of record 1/ },
    { name: 'a fractional count', keys, counts: [1, 1.5, 1], pattern: /count 1.5 of record 1/ },
    { name: 'a NaN count', keys, counts: [1, 1, Number.NaN], pattern: /count NaN of record 2/ },
    { name: 'a sum of counts above 2^53 − 1', keys, counts: [RUN_COUNT_MAX, 1, 1], pattern: /sum of counts/ },
    { name: 'order 8', keys, counts: [1, 1, 1], order: 8, pattern: /order 8 must be/ },
    { name: 'a partition out of range', keys, counts: [1, 1, 1], partition: 4096, pattern: /partition 4096 must be/ },
  ];
  for (const b of bad) {
    it(`asserts on ${b.name}, and leaves no file`, async () => {
      const filePath = path.join(dir, `bad-${b.name.replace(/\W+/g, '-')}.run`);
      const order = b.order ?? 2;
      const call = writeRunFile(nodeFs, filePath, meta(order, { partition: b.partition ?? 0 }), b.keys, b.counts, 3);
      await expect(call).rejects.toThrow(b.pattern);
      await call.catch((error: unknown) => expect(error).not.toBeInstanceOf(QuernError));
      await expect(fsp.access(filePath)).rejects.toThrow();
      expect(await temporaryFiles(filePath)).toEqual([]);
    });
  }

  it('asserts on rows out of order anywhere in a long run — inside a later block (by either coder), where two blocks meet — and leaves no file', async () => {
    const run = randomRun(3, 3 * RUN_BLOCK_RECORDS_MAX, zipfIds(prng(9), 5000), () => 1);
    expect(run.recordCount).toBeGreaterThan(2 * RUN_BLOCK_RECORDS_MAX + 600);
    const swapped = (r: number): Uint32Array => {
      const keys = run.keys.slice();
      keys.copyWithin(r * 3, (r - 1) * 3, r * 3);
      keys.set(run.keys.subarray(r * 3, r * 3 + 3), (r - 1) * 3);
      return keys;
    };
    const inside = RUN_BLOCK_RECORDS_MAX + 517;
    for (const [engine, r] of [['auto', inside], ['js', inside], ['auto', 2 * RUN_BLOCK_RECORDS_MAX]] as const) {
      setCodecEngine(engine);
      try {
        const filePath = path.join(dir, `swapped-${engine}-${r}.run`);
        await expect(writeRunFile(nodeFs, filePath, meta(3), swapped(r), run.counts, run.recordCount)).rejects.toThrow(new RegExp(`strictly increase: record ${r} is not above record ${r - 1}`));
        await expect(fsp.access(filePath)).rejects.toThrow();
        expect(await temporaryFiles(filePath)).toEqual([]);
      } finally {
        setCodecEngine('auto');
      }
    }
  });

  it('asserts when keys or counts are shorter than recordCount', async () => {
    await expect(writeRunFile(nodeFs, path.join(dir, 'short.run'), meta(2), keys, [1, 1, 1], 4)).rejects.toThrow(/keys holds 6 ids/);
    await expect(writeRunFile(nodeFs, path.join(dir, 'short.run'), meta(2), keys, [1, 1], 3)).rejects.toThrow(/counts holds 2/);
  });

  it('leaves no file at the final path when any file-system operation before the directory sync fails, and only the complete file after it', async () => {
    // A run of ~2.5 MB, so the writer makes several write calls.
    const random = prng(5);
    const run = randomRun(7, 60_000, () => Math.floor(random() * 2 ** 32), () => 1);
    const probe = faultyFs(nodeFs, { failAfterOperations: Number.MAX_SAFE_INTEGER, mode: 'once', errno: 'EIO' });
    await writeRunFile(probe, path.join(dir, 'probe.run'), meta(7), run.keys, run.counts, run.recordCount);
    const operations = probe.operations();
    expect(operations).toBeGreaterThanOrEqual(7); // create, ≥ 3 writes, sync, rename, syncDir

    for (const mode of ['once', 'always'] as const) {
      for (let failAfter = 0; failAfter < operations; failAfter++) {
        const filePath = path.join(dir, `fault-${mode}-${failAfter}.run`);
        const fs = faultyFs(nodeFs, { failAfterOperations: failAfter, mode, errno: 'ENOSPC' });
        const error = await writeRunFile(fs, filePath, meta(7), run.keys, run.counts, run.recordCount).then(
          () => undefined,
          (e: unknown) => e,
        );
        expect(error, `${mode} after ${failAfter}`).toBeInstanceOf(QuernError);
        expect((error as QuernError).code).toBe('io');
        const present = await fsp.access(filePath).then(() => true, () => false);
        if (failAfter < operations - 1) {
          expect(present, `${mode} after ${failAfter}: final path`).toBe(false);
        } else {
          // The directory sync failed after the rename: what is there is the complete, valid run
          // (the stage does not record it, and removes unrecorded runs on the next start).
          const { run: back } = await readAll(filePath);
          expect(sameBytes(back.keys, run.keys)).toBe(true);
        }
        if (mode === 'once') expect(await temporaryFiles(filePath), `once after ${failAfter}: tmp`).toEqual([]);
      }
    }
  });
});

/** `run` cut into batches of the given sizes in turn (the last takes the rest), as a merge yields. */
async function* batchesOf(run: Run, order: number, sizes: number[]): AsyncGenerator<RunBatch> {
  for (let at = 0, i = 0; at < run.recordCount; i++) {
    const n = Math.min(sizes[i % sizes.length], run.recordCount - at);
    yield { keys: run.keys.slice(at * order, (at + n) * order), counts: run.counts.slice(at, at + n), recordCount: n };
    at += n;
  }
}

describe('writeRunFileFrom (batches as they come)', () => {
  it('writes the bytes writeRunFile writes for the same records, whatever the batches', async () => {
    const random = prng(23);
    for (const [order, draws] of [[1, 0], [2, 5], [3, 3 * RUN_BLOCK_RECORDS_MAX + 17], [5, RUN_BLOCK_RECORDS_MAX]] as const) {
      const run = randomRun(order, draws, zipfIds(random, 200_000), () => 1 + Math.floor(random() * 9));
      const whole = path.join(dir, `whole-${order}.run`);
      const info = await writeRunFile(nodeFs, whole, meta(order), run.keys, run.counts, run.recordCount);
      for (const sizes of [[RUN_BLOCK_RECORDS_MAX], [1, 8191, 3000], [7]]) {
        const streamed = path.join(dir, `streamed-${order}-${sizes.join('-')}.run`);
        const streamedInfo = await writeRunFileFrom(nodeFs, streamed, meta(order), batchesOf(run, order, sizes));
        expect(await fsp.readFile(streamed), `order ${order}, batches ${sizes}`).toEqual(await fsp.readFile(whole));
        expect({ ...streamedInfo, filePath: whole }).toEqual(info);
      }
    }
  });

  it('refuses records out of order across batches, and leaves no file', async () => {
    const run = randomRun(2, 2 * RUN_BLOCK_RECORDS_MAX, zipfIds(prng(3), 50_000), () => 1);
    const swapped = { keys: Uint32Array.from(run.keys), counts: run.counts, recordCount: run.recordCount };
    // The first row of the second block swapped with the last of the first: each block is in order
    // within itself only if the swap crosses their boundary, which the writer must catch.
    const last = RUN_BLOCK_RECORDS_MAX - 1;
    for (let k = 0; k < 2; k++) [swapped.keys[last * 2 + k], swapped.keys[(last + 1) * 2 + k]] = [swapped.keys[(last + 1) * 2 + k], swapped.keys[last * 2 + k]];
    const filePath = path.join(dir, 'unordered.run');
    await expect(writeRunFileFrom(nodeFs, filePath, meta(2), batchesOf(swapped, 2, [5000]))).rejects.toThrow(/strictly increase/);
    expect(await fsp.access(filePath).then(() => true, () => false)).toBe(false);
    expect(await temporaryFiles(filePath)).toEqual([]);
  });

  it('leaves no file when its batches fail or a file-system operation fails', async () => {
    const run = randomRun(3, 20_000, zipfIds(prng(8), 100_000), () => 1);
    async function* failing(): AsyncGenerator<RunBatch> {
      yield* batchesOf({ keys: run.keys.slice(0, 3 * 9000), counts: run.counts.slice(0, 9000), recordCount: 9000 }, 3, [4000]);
      throw new QuernError('corrupt', 'a source went bad');
    }
    const filePath = path.join(dir, 'failing.run');
    await expect(writeRunFileFrom(nodeFs, filePath, meta(3), failing())).rejects.toThrow(/a source went bad/);
    expect(await fsp.access(filePath).then(() => true, () => false)).toBe(false);
    expect(await temporaryFiles(filePath)).toEqual([]);
    const probe = faultyFs(nodeFs, { failAfterOperations: Number.MAX_SAFE_INTEGER, mode: 'once', errno: 'EIO' });
    await writeRunFileFrom(probe, path.join(dir, 'probe-from.run'), meta(3), batchesOf(run, 3, [8192]));
    const operations = probe.operations();
    for (let failAfter = 0; failAfter < operations - 1; failAfter++) {
      const target = path.join(dir, `fault-from-${failAfter}.run`);
      const fs = faultyFs(nodeFs, { failAfterOperations: failAfter, mode: 'once', errno: 'ENOSPC' });
      const error = await writeRunFileFrom(fs, target, meta(3), batchesOf(run, 3, [8192])).then(() => undefined, (e: unknown) => e);
      expect(error, `after ${failAfter}`).toBeInstanceOf(QuernError);
      expect((error as QuernError).code).toBe('io');
      expect(await fsp.access(target).then(() => true, () => false), `after ${failAfter}`).toBe(false);
      expect(await temporaryFiles(target), `after ${failAfter}`).toEqual([]);
    }
  });
});

/** Temporary files the writer may have left beside `filePath` (writeFileThrough's `<name>.<pid>.tmp`). */
async function temporaryFiles(filePath: string): Promise<string[]> {
  const name = path.basename(filePath);
  return (await fsp.readdir(path.dirname(filePath))).filter((f) => f.startsWith(`${name}.`) && f.endsWith('.tmp'));
}

// ---- Damage -------------------------------------------------------------------------------------

describe('RunReader on damaged files', () => {
  async function writeSample(name: string, order: number, draws: number, seed: number): Promise<{ filePath: string; bytes: Buffer }> {
    const random = prng(seed);
    const run = randomRun(order, draws, zipfIds(random, 50_000), () => 1 + Math.floor(random() ** 3 * 300));
    const filePath = path.join(dir, name);
    await writeRunFile(nodeFs, filePath, meta(order), run.keys, run.counts, run.recordCount);
    return { filePath, bytes: await fsp.readFile(filePath) };
  }

  it('every flipped byte of a small file is reported as corrupt', async () => {
    const { bytes } = await writeSample('small.run', 3, 40, 21);
    const damaged = path.join(dir, 'small-damaged.run');
    let cases = 0;
    for (let offset = 0; offset < bytes.length; offset++) {
      for (const mask of [0x01, 0xff]) {
        const copy = Buffer.from(bytes);
        copy[offset] ^= mask;
        await fsp.writeFile(damaged, copy);
        expectCorrupt(await readError(damaged), `byte ${offset} ^ ${mask}`);
        cases++;
      }
    }
    expect(cases).toBe(bytes.length * 2);
  });

  it('every flipped byte of an empty run is reported as corrupt', async () => {
    const filePath = path.join(dir, 'empty-damaged.run');
    await writeRunFile(nodeFs, filePath, meta(2), new Uint32Array(0), [], 0);
    const bytes = await fsp.readFile(filePath);
    for (let offset = 0; offset < bytes.length; offset++) {
      const copy = Buffer.from(bytes);
      copy[offset] ^= 0x10;
      await fsp.writeFile(filePath, copy);
      expectCorrupt(await readError(filePath), `byte ${offset}`);
    }
  });

  it('flipped bytes at 400 seeded positions of a three-block file are reported as corrupt', async () => {
    const { bytes } = await writeSample('multi.run', 4, 2 * RUN_BLOCK_RECORDS_MAX + 500, 22);
    const damaged = path.join(dir, 'multi-damaged.run');
    const random = prng(23);
    for (let i = 0; i < 400; i++) {
      const offset = Math.floor(random() * bytes.length);
      const copy = Buffer.from(bytes);
      copy[offset] ^= 1 << Math.floor(random() * 8);
      await fsp.writeFile(damaged, copy);
      expectCorrupt(await readError(damaged), `byte ${offset}`);
    }
  });

  it('names the block, its offset and what failed', async () => {
    const { bytes } = await writeSample('named.run', 2, 2 * RUN_BLOCK_RECORDS_MAX + 10, 24);
    const reader = await RunReader.open(path.join(dir, 'named.run'));
    const first = await reader.nextBatch();
    await reader.close();
    expect(first?.recordCount).toBe(RUN_BLOCK_RECORDS_MAX);
    // Find block 1: block 0 starts after the header; its length is in its own header.
    const block1 = RUN_HEADER_BYTES + 12 + 2 * 4 + bytes.readUInt32LE(RUN_HEADER_BYTES + 8);
    const copy = Buffer.from(bytes);
    copy[block1 + 100] ^= 0x04;
    const damaged = path.join(dir, 'named-damaged.run');
    await fsp.writeFile(damaged, copy);
    const error = await readError(damaged);
    expectCorrupt(error, 'block 1');
    expect((error as Error).message).toContain(damaged);
    expect((error as Error).message).toContain(`block 1 at offset ${block1}: checksum mismatch`);
  });

  it('every truncation of a small file and sampled truncations of a larger one are reported as corrupt', async () => {
    const small = await writeSample('trunc-small.run', 2, 30, 31);
    const large = await writeSample('trunc-large.run', 3, RUN_BLOCK_RECORDS_MAX + 200, 32);
    const damaged = path.join(dir, 'trunc-damaged.run');
    const random = prng(33);
    const lengths: [Buffer, number][] = [];
    for (let length = 0; length < small.bytes.length; length++) lengths.push([small.bytes, length]);
    for (let i = 0; i < 150; i++) lengths.push([large.bytes, Math.floor(random() * large.bytes.length)]);
    for (let cut = 1; cut <= 40; cut++) lengths.push([large.bytes, large.bytes.length - cut]);
    for (const [bytes, length] of lengths) {
      await fsp.writeFile(damaged, bytes.subarray(0, length));
      expectCorrupt(await readError(damaged), `truncated to ${length} of ${bytes.length}`);
    }
  });

  it('extra bytes after the trailer are reported as corrupt', async () => {
    const { bytes } = await writeSample('extended.run', 2, 30, 34);
    const damaged = path.join(dir, 'extended-damaged.run');
    for (const extra of [Buffer.from([0]), Buffer.alloc(RUN_TRAILER_BYTES), bytes.subarray(bytes.length - RUN_TRAILER_BYTES)]) {
      await fsp.writeFile(damaged, Buffer.concat([bytes, extra]));
      expectCorrupt(await readError(damaged), `extended by ${extra.length}`);
    }
  });

  /** Rewrites the header checksum and its copy in the trailer, and the trailer checksum. */
  function resealHeader(copy: Buffer): void {
    const headerCrc = crc32(copy.subarray(0, 60));
    copy.writeUInt32LE(headerCrc, 60);
    const t = copy.length - RUN_TRAILER_BYTES;
    copy.writeUInt32LE(headerCrc, t + 20);
    copy.writeUInt32LE(crc32(copy.subarray(t, t + 28)), t + 28);
  }
  /** Rewrites the checksum of the block at `at` of `order` after its bytes were edited. */
  function resealBlock(copy: Buffer, at: number, order: number): void {
    const end = at + 12 + 4 * order + copy.readUInt32LE(at + 8);
    copy.writeUInt32LE(crc32(copy.subarray(at + 4, end)), at);
  }

  it('checks fields on their own, not only through checksums', async () => {
    const { bytes } = await writeSample('fields.run', 3, 50, 41);
    const damaged = path.join(dir, 'fields-damaged.run');
    const edits: { name: string; edit: (copy: Buffer) => void; pattern: RegExp }[] = [
      { name: 'magic', edit: (c) => c.write('XRN', 0, 'latin1'), pattern: /bad magic .* not a run file/ },
      { name: 'newer version', edit: (c) => { c.writeUInt16LE(RUN_FORMAT_VERSION + 1, 6); resealHeader(c); }, pattern: /format version 2 .* not supported/ },
      { name: 'older version', edit: (c) => { c.writeUInt16LE(0, 6); resealHeader(c); }, pattern: /format version 0 .* not supported/ },
      { name: 'reserved header byte', edit: (c) => { c[50] = 1; resealHeader(c); }, pattern: /reserved header byte at offset 50/ },
      { name: 'order 0', edit: (c) => { c.writeUInt32LE(0, 8); resealHeader(c); }, pattern: /order 0 outside/ },
      { name: 'huge record count', edit: (c) => { c.writeUInt32LE(0xffff_ffff, 24); c.writeUInt32LE(0x1f_ffff, 28); resealHeader(c); }, pattern: /record count .* inconsistent/ },
      { name: 'record count and block count', edit: (c) => { c.writeUInt32LE(2, 40); resealHeader(c); }, pattern: /block count 2 does not match/ },
      { name: 'sum of counts', edit: (c) => { c.writeUInt32LE(c.readUInt32LE(32) + 1, 32); resealHeader(c); }, pattern: /blocks sum to \d+ counts, header states/ },
      { name: 'block record bytes 2^32 − 1', edit: (c) => { c.writeUInt32LE(0xffff_ffff, 64 + 8); resealBlock(c, 64, 3); }, pattern: /block 0 at offset 64: 4294967295 record bytes impossible/ },
      { name: 'block record count', edit: (c) => { c.writeUInt32LE(0x7fff_ffff, 64 + 4); resealBlock(c, 64, 3); }, pattern: /block 0 at offset 64: record count 2147483647, expected 50/ },
      { name: 'shared prefix equal to the order', edit: (c) => {
        // The second record starts after the first record's count varint (one byte: counts < 128 here).
        const second = 64 + 12 + 12 + (c[64 + 24] >= 0x80 ? 2 : 1);
        c[second] = 3;
        resealBlock(c, 64, 3);
      }, pattern: /block 0 at offset 64, record 1: shared prefix 3 is not below the order 3/ },
    ];
    for (const e of edits) {
      const copy = Buffer.from(bytes);
      e.edit(copy);
      await fsp.writeFile(damaged, copy);
      const error = await readError(damaged);
      expectCorrupt(error, e.name);
      expect((error as Error).message, e.name).toMatch(e.pattern);
    }
  });

  it('keeps failing after an error, and reports a missing file as io', async () => {
    const { bytes } = await writeSample('sticky.run', 2, 30, 51);
    const damaged = path.join(dir, 'sticky-damaged.run');
    const copy = Buffer.from(bytes);
    copy[RUN_HEADER_BYTES + 30] ^= 1;
    await fsp.writeFile(damaged, copy);
    const reader = await RunReader.open(damaged);
    const first = await reader.nextBatch().catch((e: unknown) => e);
    expectCorrupt(first, 'first call');
    await expect(reader.nextBatch()).rejects.toBe(first);

    const missing = await RunReader.open(path.join(dir, 'missing.run')).catch((e: unknown) => e);
    expect(missing).toBeInstanceOf(QuernError);
    expect((missing as QuernError).code).toBe('io');
  });
});
