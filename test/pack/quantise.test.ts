/**
 * Codebooks and codes: exact when the values are few, −∞ kept apart, nearest codes, deterministic,
 * and the k-means iterations improve on the quantile start.
 */
import { describe, expect, test } from 'vitest';
import { encodeValues, fitCodebook } from '../../src/pack/quantise.ts';
import { seededRandom } from '../support/seeded.ts';

/** log10 probabilities shaped like a model's: a Zipf-like spread over [−7, 0], with a few repeats. */
function modelLikeValues(seed: number, count: number): Float64Array {
  const random = seededRandom(seed);
  return Float64Array.from({ length: count }, () => (random() < 0.1 ? -1.5 : Math.log10(random() ** 3 * 0.999 + 1e-7)));
}

function rootMeanSquareError(values: Float64Array, codebook: Float64Array, codes: ArrayLike<number>): number {
  let sum = 0;
  for (let i = 0; i < values.length; i++) sum += (codebook[codes[i]] - values[i]) ** 2;
  return Math.sqrt(sum / values.length);
}

describe('quantisation', () => {
  test('no more distinct values than codes: the codebook is the values and nothing is lost', () => {
    const values = Float64Array.from([-3, -1, -2, -1, -3, -0.5, -Infinity, -2]);
    const codebook = fitCodebook(values, 8);
    expect([...codebook]).toEqual([-Infinity, -3, -2, -1, -0.5]);
    const codes = encodeValues(values, codebook, 8);
    expect(Array.from(codes, (code) => codebook[code])).toEqual([...values]);
  });

  test('−∞ has a code of its own, the first, and is never mixed with finite values', () => {
    const values = modelLikeValues(1, 20_000);
    values[7] = -Infinity;
    values[9000] = -Infinity;
    for (const bits of [8, 16] as const) {
      const codebook = fitCodebook(values, bits);
      expect(codebook.length).toBeLessThanOrEqual(2 ** bits);
      expect(codebook[0]).toBe(-Infinity);
      expect(Number.isFinite(codebook[1])).toBe(true);
      const codes = encodeValues(values, codebook, bits);
      values.forEach((value, i) => expect(codes[i] === 0).toBe(value === -Infinity));
    }
  });

  test('each value gets the nearest codebook value; the codebook ascends; the same values give the same codebook', () => {
    const values = modelLikeValues(2, 50_000);
    const codebook = fitCodebook(values, 8);
    expect(codebook.length).toBe(256);
    for (let c = 1; c < codebook.length; c++) expect(codebook[c]).toBeGreaterThan(codebook[c - 1]);
    const codes = encodeValues(values, codebook, 8);
    let farther = 0;
    for (let i = 0; i < values.length; i += 97) {
      const distance = Math.abs(codebook[codes[i]] - values[i]);
      for (const other of codebook) if (Math.abs(other - values[i]) < distance) farther++;
    }
    expect(farther).toBe(0);
    expect(fitCodebook(values, 8)).toEqual(codebook);
  });

  test('k-means iterations beat the quantile start, and 16 bits beat 8 by far', () => {
    const values = modelLikeValues(3, 100_000);
    const sorted = Float64Array.from(values).sort();
    // The quantile start: the mean of each of 256 equal runs of the sorted values.
    const start = Float64Array.from({ length: 256 }, (_, c) => {
      const from = Math.floor((c * sorted.length) / 256);
      const to = Math.floor(((c + 1) * sorted.length) / 256);
      let sum = 0;
      for (let i = from; i < to; i++) sum += sorted[i];
      return sum / (to - from);
    });
    const unique = Float64Array.from(new Set(start));
    const startError = rootMeanSquareError(values, unique, encodeValues(values, unique, 8));
    const fitted = fitCodebook(values, 8);
    const error8 = rootMeanSquareError(values, fitted, encodeValues(values, fitted, 8));
    const fitted16 = fitCodebook(values, 16);
    const error16 = rootMeanSquareError(values, fitted16, encodeValues(values, fitted16, 16));
    expect(error8).toBeLessThan(startError * 0.95);
    expect(error16).toBeLessThan(error8 / 50);
  });

  test('back-off weights: only the included values are fitted; the others get code 0', () => {
    const values = Float64Array.from([-0.3, 0, -0.7, 0, -0.3]);
    const include = Uint8Array.from([1, 0, 1, 0, 1]);
    const codebook = fitCodebook(values, 8, include);
    expect([...codebook]).toEqual([-0.7, -0.3]);
    expect([...encodeValues(values, codebook, 8, include)]).toEqual([1, 0, 0, 0, 1]);
    expect([...fitCodebook(new Float64Array(0), 8)]).toEqual([0]);
  });
});
