import { describe, expect, test } from 'vitest';
import { countOfCountsFromCounts } from '../../src/stats/count-of-counts.ts';
import {
  averagingTransform,
  goodTuringEstimates,
  simpleGoodTuring,
  smoothedCountOfCounts,
  unseenMass,
  type SimpleGoodTuringFit,
} from '../../src/stats/good-turing.ts';
import type { CountOfCounts } from '../../src/stats/types.ts';
import { seededRandom } from '../support/seeded.ts';

function fitted(countOfCounts: CountOfCounts): SimpleGoodTuringFit {
  const result = simpleGoodTuring(countOfCounts);
  if (result.status !== 'fitted') throw new Error(`expected a fit, got: ${result.reason}`);
  return result;
}

/** P0 + Σ n_r·p_r: all the probability mass. */
function massOf(fit: SimpleGoodTuringFit): number {
  return fit.unseenMass + fit.rows.reduce((sum, row) => sum + row.nR * row.probability, 0);
}

describe('plain Good-Turing', () => {
  test('r* = (r+1)·n_{r+1}/n_r, with the zero cases stated', () => {
    // Hand-worked: n1 = 10, n2 = 4, n3 = 3, n5 = 1; N = 10 + 8 + 9 + 5 = 32.
    const estimates = goodTuringEstimates([[1, 10], [2, 4], [3, 3], [5, 1]]);
    expect(estimates.map((e) => e.rStar)).toEqual([0.8, 2.25, null, null, null]); // 2·4/10, 3·3/4
    expect(estimates[2].note).toMatch(/n4 = 0/); // n4 = 0: r*3 would be 0
    expect(estimates[3].note).toMatch(/n4 = 0/); // no n-gram seen 4 times
    expect(estimates[4].note).toMatch(/n6 = 0/);
    expect(estimates[0].note).toBeNull();
    expect(unseenMass([[1, 10], [2, 4], [3, 3], [5, 1]])).toBe(10 / 32);
    expect(unseenMass([])).toBeNull();
    expect(() => goodTuringEstimates([[1, 1]], 0)).toThrow(/rMax must be an integer ≥ 1/);
  });
});

describe('Simple Good-Turing (Gale & Sampson 1995)', () => {
  test('a small example worked by hand', () => {
    // n1 = 4, n2 = 2, n4 = 1.   N = 4 + 4 + 4 = 12,  P0 = 4/12 = 1/3.
    // Z_1 = 4/(0.5·(2 − 0)) = 4;  Z_2 = 2/(0.5·(4 − 1)) = 4/3;  Z_4 = 1/(0.5·(6 − 2)) = 1/2 (t = 2·4 − 2 = 6).
    // ln r = 0, ln 2, 2 ln 2 are equally spaced, so the slope is (ln Z_4 − ln Z_1)/(2 ln 2)
    //   = (−ln 2 − 2 ln 2)/(2 ln 2) = −3/2, and a = mean(ln Z) + (3/2)·mean(ln r) = ln(8/3)/3 + (3/2)·ln 2.
    // LGT: y_r = r·(1 + 1/r)^(−1/2): y_1 = 1/√2, y_2 = 2/√1.5, y_4 = 4/√1.25.
    // Switch at r = 1: x_1 = 2·2/4 = 1, |1 − 0.7071| = 0.29 ≤ 1.96·√(4·(2/16)·(1 + 2/4)) = 1.70.
    // N' = 4·y_1 + 2·y_2 + 1·y_4;  p_r = (2/3)·y_r/N'.
    const fit = fitted([[1, 4], [2, 2], [4, 1]]);
    expect(averagingTransform([[1, 4], [2, 2], [4, 1]])).toEqual([4, 4 / 3, 1 / 2]);
    expect(fit.total).toBe(12);
    expect(fit.unseenMass).toBe(1 / 3);
    expect(fit.slope).toBeCloseTo(-1.5, 12);
    expect(fit.intercept).toBeCloseTo(Math.log(8 / 3) / 3 + 1.5 * Math.log(2), 12);
    expect(fit.slopeWarning).toBe(false);
    expect(fit.switchR).toBe(1);
    const y = [1 / Math.SQRT2, 2 / Math.sqrt(1.5), 4 / Math.sqrt(1.25)];
    expect(fit.rows.map((row) => row.source)).toEqual(['lgt', 'lgt', 'lgt']);
    fit.rows.forEach((row, i) => expect(row.rStar).toBeCloseTo(y[i], 12));
    const renormalised = 4 * y[0] + 2 * y[1] + y[2];
    expect(fit.renormalisedTotal).toBeCloseTo(renormalised, 12);
    fit.rows.forEach((row, i) => expect(row.probability).toBeCloseTo(((2 / 3) * y[i]) / renormalised, 14));
    expect(fit.rows.map((row) => row.turing)).toEqual([1, null, null]);
  });

  test('keeps Turing estimates while they differ significantly, then switches for good', () => {
    // n1 = 1000, n2 = 100, n3 = 50, n4 = 30, n5 = 300 (n5 deliberately huge: the Turing estimate
    // at r = 4, 5·300/30 = 50, is far from the smoothed one, yet the switch is never undone).
    const countOfCounts: CountOfCounts = [[1, 1000], [2, 100], [3, 50], [4, 30], [5, 300]];
    const fit = fitted(countOfCounts);
    const b = fit.slope;
    const lgt = (r: number): number => r * (1 + 1 / r) ** (b + 1);
    const bound = (r: number, nR: number, nNext: number): number => 1.96 * Math.sqrt((r + 1) ** 2 * (nNext / nR ** 2) * (1 + nNext / nR));
    // r = 1: x = 2·100/1000 = 0.2, significantly different → Turing kept.
    expect(Math.abs(0.2 - lgt(1))).toBeGreaterThan(bound(1, 1000, 100));
    expect(fit.rows[0]).toMatchObject({ r: 1, source: 'turing', rStar: 0.2, turing: 0.2 });
    // r = 2: x = 3·50/100 = 1.5, within the bound → switch here.
    expect(Math.abs(1.5 - lgt(2))).toBeLessThanOrEqual(bound(2, 100, 50));
    expect(fit.switchR).toBe(2);
    // r = 4: x = 50 is significantly different, but the LGT estimate stays.
    expect(Math.abs(50 - lgt(4))).toBeGreaterThan(bound(4, 30, 300));
    expect(fit.rows.slice(1).map((row) => row.source)).toEqual(['lgt', 'lgt', 'lgt', 'lgt']);
    fit.rows.slice(1).forEach((row) => expect(row.rStar).toBeCloseTo(lgt(row.r), 12));
    expect(massOf(fit)).toBeCloseTo(1, 12);
  });

  test('Gale & Sampson 1995, prosody frequency table', () => {
    // The table of the paper's worked example. SOURCE: from memory (the lead's brief), not checked
    // against the printed paper; the slope below matching the remembered value to 4 digits is good
    // evidence the table is right, since b depends on every pair.
    // prettier-ignore
    const flat = [1, 120, 2, 40, 3, 24, 4, 13, 5, 15, 6, 5, 7, 11, 8, 2, 9, 2, 10, 1, 12, 3, 14, 2, 15, 1, 16, 1, 17, 3,
      19, 1, 20, 3, 21, 2, 23, 3, 24, 3, 25, 3, 26, 2, 27, 2, 28, 1, 31, 2, 32, 2, 33, 1, 34, 2, 36, 2, 41, 3, 43, 1,
      45, 3, 46, 1, 47, 1, 50, 1, 71, 1, 84, 1, 101, 1, 105, 1, 121, 1, 124, 1, 146, 1, 162, 1, 193, 1, 199, 1, 224, 1,
      226, 1, 254, 1, 257, 1, 339, 1, 421, 1, 456, 1, 481, 1, 483, 1, 1140, 1, 1256, 1, 1322, 1, 1530, 1, 2131, 1,
      2395, 1, 6925, 1, 7846, 1];
    const countOfCounts: CountOfCounts = [];
    for (let i = 0; i < flat.length; i += 2) countOfCounts.push([flat[i], flat[i + 1]]);
    const fit = fitted(countOfCounts);

    // Σ r·n_r of this table is 30,902 (computed here). The remembered N = 20,889 does NOT match
    // the remembered table; the remembered P0 = 0.005745 is 120/20,889, so it belongs with that N.
    // Neither remembered value is asserted: with this table the method gives P0 = 120/30,902.
    expect(fit.total).toBe(30_902);
    expect(fit.unseenMass).toBe(120 / 30_902); // 0.0038832…

    // Slope b ≈ −1.389: remembered published value (from memory, fairly sure of the 3 decimals).
    expect(fit.slope).toBeCloseTo(-1.389, 3);
    expect(fit.slopeWarning).toBe(false);
    // Intercept: computed ln a = 4.4686 (log10 a = 1.9407). The remembered "a ≈ 1.7" matches
    // neither base and is not asserted; the value is locked here only against regressions.
    expect(fit.intercept).toBeCloseTo(4.4686, 4);

    // Z_r spot checks by hand: r = 10 between 9 and 12 → 1/(0.5·3); the last r = 7846 after 6925
    // → t = 2·7846 − 6925 = 8767, Z = 1/(0.5·1842) = 1/921.
    const z = averagingTransform(countOfCounts);
    expect(z[9]).toBeCloseTo(2 / 3, 15);
    expect(z[z.length - 1]).toBeCloseTo(1 / 921, 15);

    // Switch rule at r = 1: x = 2·40/120 = 0.6667, y = 2^(b+1) = 0.7635,
    // |x − y| = 0.097 ≤ 1.96·√(4·(40/120²)·(1 + 40/120)) = 0.2386 → smoothed from r = 1 on.
    expect(fit.switchR).toBe(1);
    expect(fit.rows[0].rStar).toBeCloseTo(2 ** (fit.slope + 1), 12);
    expect(fit.rows[0].rStar).toBeCloseTo(0.7635, 4);
    // The remembered "r*_1 ≈ 0.3983" and "p_1 ≈ 0.0000191" (from memory, unsure) do not follow from
    // this table by the published method: we get r*_1 = 0.7635 and p_1 = (1 − P0)·r*_1/N' below.
    expect(fit.rows[0].probability).toBeCloseTo(((1 - fit.unseenMass) * fit.rows[0].rStar) / fit.renormalisedTotal, 15);
    expect(fit.rows[0].probability).toBeCloseTo(2.4685e-5, 8);
    expect(massOf(fit)).toBeCloseTo(1, 12);
  });

  test('probabilities sum to 1 and r* ≥ 0 on random count-of-counts', () => {
    const random = seededRandom(5);
    for (let trial = 0; trial < 30; trial++) {
      const counts: number[] = [];
      const types = 20 + Math.floor(random() * 3000);
      const exponent = 0.6 + random() * 1.5;
      for (let i = 0; i < types; i++) counts.push(Math.max(1, Math.floor(1 / random() ** exponent)));
      const countOfCounts = countOfCountsFromCounts(counts);
      const result = simpleGoodTuring(countOfCounts);
      if (result.status === 'unavailable') continue;
      expect(massOf(result)).toBeCloseTo(1, 10);
      expect(result.slopeWarning).toBe(result.slope > -1);
      let switched = false;
      for (const row of result.rows) {
        expect(row.rStar).toBeGreaterThanOrEqual(0);
        if (row.source === 'lgt') switched = true;
        else expect(switched).toBe(false); // never back to Turing after the switch
      }
      expect(smoothedCountOfCounts(result, 1)).toBeCloseTo(Math.exp(result.intercept), 12);
    }
  });

  test('flags a slope above −1 and refuses a fit with fewer than two distinct r', () => {
    // n1 = 2, n2 = 2, n3 = 2: Z = 2, 2, and 2/(0.5·(4 − 2)) = 2 → slope 0 > −1.
    const flat = fitted([[1, 2], [2, 2], [3, 2]]);
    expect(flat.slope).toBeCloseTo(0, 12);
    expect(flat.slopeWarning).toBe(true);
    expect(simpleGoodTuring([[1, 5]])).toEqual({ status: 'unavailable', reason: expect.stringMatching(/two distinct counts/) });
    expect(simpleGoodTuring([]).status).toBe('unavailable');
  });
});
