/**
 * Shared by the streaming-estimate tests: counting a job in-process (the real count stage: worker
 * threads, run files, LMDB), and comparing two models row by row.
 */
import { expect } from 'vitest';
import { runCount } from '../../src/job/pipeline.ts';
import { PARTITIONS_DEFAULT, CHUNK_BYTES_TARGET } from '../../src/limits.ts';
import type { LanguageModel } from '../../src/estimate/model.ts';

/** Counts `inputs` into `jobDir` at `order` (lower-cased), with `partitions` and a counting budget. */
export async function countJob(jobDir: string, inputs: string[], order: number, options: { partitions?: number; memoryBytes?: number; chunkBytes?: number; textField?: string } = {}): Promise<void> {
  await runCount({
    jobDir,
    inputSpecs: inputs,
    config: {
      order,
      partitions: options.partitions ?? PARTITIONS_DEFAULT,
      normalize: { lowercase: true, unicode: 'none', split: 'space' },
      format: 'auto',
      textField: options.textField ?? null,
      skipBad: false,
      vocabCap: {},
      chunkBytes: options.chunkBytes ?? CHUNK_BYTES_TARGET,
    },
    workers: 2,
    memoryBytes: options.memoryBytes ?? 256 << 20,
    restart: false,
  });
}

/** log10 values agree within `tolerance` (−∞ only with −∞). */
function close(a: number, b: number, tolerance: number): boolean {
  if (a === b) return true;
  return Number.isFinite(a) && Number.isFinite(b) && Math.abs(a - b) <= tolerance;
}

/**
 * Expects `actual` to be `expected`: the same header, the same rows of every order, log10
 * probabilities and back-off weights within `tolerance`, the same context rows. Reports the first
 * difference by order and row.
 */
export function expectSameModel(actual: LanguageModel, expected: LanguageModel, tolerance = 1e-12): void {
  const { orders: actualOrders, ...actualHeader } = actual;
  const { orders: expectedOrders, ...expectedHeader } = expected;
  expect(actualHeader).toEqual(expectedHeader);
  expect(actualOrders.length).toBe(expectedOrders.length);
  for (let n = 1; n <= expected.order; n++) {
    const a = actualOrders[n - 1];
    const e = expectedOrders[n - 1];
    expect(a.log10Prob.length, `rows of order ${n}`).toBe(e.log10Prob.length);
    expect(Buffer.from(a.ids.buffer, a.ids.byteOffset, a.ids.byteLength).equals(Buffer.from(e.ids.buffer, e.ids.byteOffset, e.ids.byteLength)), `ids of order ${n}`).toBe(true);
    expect(Array.from(a.contextRow)).toEqual(Array.from(e.contextRow));
    for (let row = 0; row < e.log10Prob.length; row++) {
      if (!close(a.log10Prob[row], e.log10Prob[row], tolerance)) throw new Error(`order ${n} row ${row}: log10 p ${a.log10Prob[row]} ≠ ${e.log10Prob[row]}`);
      if (!close(a.log10BackOff[row], e.log10BackOff[row], tolerance)) throw new Error(`order ${n} row ${row}: log10 back-off ${a.log10BackOff[row]} ≠ ${e.log10BackOff[row]}`);
    }
  }
}
