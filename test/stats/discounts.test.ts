import { describe, expect, test } from 'vitest';
import {
  absoluteDiscount,
  katzDiscounts,
  kneserNeyCountOfCounts,
  modifiedKneserNeyDiscounts,
} from '../../src/stats/discounts.ts';
import { QuernError } from '../../src/errors.ts';
import type { CountOfCounts } from '../../src/stats/types.ts';

// Worked by hand: n1 = 100, n2 = 40, n3 = 20, n4 = 12, n5 = 8, n6 = 5 (and a few larger counts,
// which none of the formulas read).
const HAND: CountOfCounts = [[1, 100], [2, 40], [3, 20], [4, 12], [5, 8], [6, 5], [9, 2], [30, 1]];

describe('discounts on a hand-worked count-of-counts', () => {
  test('absolute discount, Ney, Essen & Kneser 1994: D = n1/(n1 + 2·n2)', () => {
    // D = 100/(100 + 2·40) = 100/180 = 5/9.
    const result = absoluteDiscount(HAND);
    expect(result.discount).toBeCloseTo(5 / 9, 12);
    expect(result).toMatchObject({ n1: 100, n2: 40, note: null });
  });

  test('modified Kneser-Ney, Chen & Goodman 1998', () => {
    // Y   = n1/(n1 + 2·n2)   = 100/180              = 5/9
    // D1  = 1 − 2Y·n2/n1     = 1 − (10/9)·(40/100)  = 1 − 4/9   = 5/9
    // D2  = 2 − 3Y·n3/n2     = 2 − (15/9)·(20/40)   = 2 − 5/6   = 7/6
    // D3+ = 3 − 4Y·n4/n3     = 3 − (20/9)·(12/20)   = 3 − 4/3   = 5/3
    const result = modifiedKneserNeyDiscounts(HAND);
    expect(result.y).toBeCloseTo(5 / 9, 12);
    expect(result.d1).toBeCloseTo(5 / 9, 12);
    expect(result.d2).toBeCloseTo(7 / 6, 12);
    expect(result.d3Plus).toBeCloseTo(5 / 3, 12);
    expect(result).toMatchObject({ n1: 100, n2: 40, n3: 20, n4: 12, notes: [] });
  });

  test('Katz 1987 discount ratios, k = 5', () => {
    // A = (k+1)·n6/n1 = 6·5/100 = 3/10;  d_r = (r*/r − 3/10)/(7/10).
    // r*1 = 2·40/100 = 4/5,  r*1/1 = 4/5  → d1 = (4/5 − 3/10)/(7/10)   = (1/2)/(7/10)   = 5/7
    // r*2 = 3·20/40  = 3/2,  r*2/2 = 3/4  → d2 = (3/4 − 3/10)/(7/10)   = (9/20)/(7/10)  = 9/14
    // r*3 = 4·12/20  = 12/5, r*3/3 = 4/5  → d3 = 5/7
    // r*4 = 5·8/12   = 10/3, r*4/4 = 5/6  → d4 = (5/6 − 3/10)/(7/10)   = (8/15)/(7/10)  = 16/21
    // r*5 = 6·5/8    = 15/4, r*5/5 = 3/4  → d5 = 9/14
    const result = katzDiscounts(HAND);
    expect(result.k).toBe(5);
    expect(result.cutoffShare).toBeCloseTo(3 / 10, 12);
    const expected = [5 / 7, 9 / 14, 5 / 7, 16 / 21, 9 / 14];
    result.discounts.forEach((d, i) => expect(d.ratio).toBeCloseTo(expected[i], 12));
    expect(result.discounts.map((d) => d.rStar)).toEqual([4 / 5, 3 / 2, 12 / 5, 10 / 3, 15 / 4]);
  });
});

describe('discounts the formulas cannot give', () => {
  test('zero n1..n4 make modified Kneser-Ney discounts undefined or out of range, with reasons', () => {
    // n3 = 0: D3+ divides by n3 (undefined); D2 = 2 − 3Y·0/n2 = 2, at the edge of its range.
    const noThrees = modifiedKneserNeyDiscounts([[1, 10], [2, 5], [4, 1]]);
    expect(noThrees.d3Plus).toBeNull();
    expect(noThrees.d2).toBe(2);
    expect(noThrees.notes).toEqual(['D3+ is undefined: n3 = 0']);
    // n4 = 0: D3+ = 3 exactly (nothing subtracted from 3), the count it discounts.
    expect(modifiedKneserNeyDiscounts([[1, 10], [2, 5], [3, 2]]).d3Plus).toBe(3);
    // n1 = 0: Y = 0, D1 undefined.
    const noOnes = modifiedKneserNeyDiscounts([[2, 5], [3, 2], [4, 1]]);
    expect(noOnes.y).toBe(0);
    expect(noOnes.d1).toBeNull();
    expect(noOnes.notes).toContain('D1 is undefined: n1 = 0');
    // n1 = n2 = 0: nothing defined.
    expect(modifiedKneserNeyDiscounts([[5, 3]]).notes).toEqual(['Y, D1, D2 and D3+ are undefined: n1 = n2 = 0']);
  });

  test('absolute discount edges', () => {
    expect(absoluteDiscount([[1, 7]]).discount).toBe(1); // n2 = 0 → D = 1
    expect(absoluteDiscount([[2, 7]]).discount).toBe(0); // n1 = 0 → D = 0
    expect(absoluteDiscount([[3, 7]])).toMatchObject({ discount: null, note: 'n1 = n2 = 0' });
  });

  test('Katz with n1 = 0, with (k+1)·n_{k+1}/n1 = 1, and with zero n_r', () => {
    expect(katzDiscounts([[2, 4]]).discounts.every((d) => d.ratio === null && d.note === 'n1 = 0')).toBe(true);
    // k = 5: 6·n6/n1 = 6·1/6 = 1 → the denominator vanishes.
    const degenerate = katzDiscounts([[1, 6], [2, 3], [6, 1]]);
    expect(degenerate.cutoffShare).toBe(1);
    expect(degenerate.discounts.every((d) => d.ratio === null)).toBe(true);
    const gaps = katzDiscounts([[1, 10], [2, 4], [4, 1]], 3); // k = 3: A = 4·n4/n1 = 4/10
    expect(gaps.discounts.map((d) => d.note)).toEqual([null, 'n3 = 0', 'n3 = 0']);
    expect(gaps.discounts[0].ratio).toBeCloseTo((2 * 4 / 10 - 4 / 10) / (1 - 4 / 10), 12); // (0.8 − 0.4)/0.6 = 2/3
    expect(() => katzDiscounts(HAND, 0)).toThrow(QuernError);
  });
});

describe('which counts modified Kneser-Ney discounts', () => {
  const raw: CountOfCounts = [[1, 3]];
  const continuation: CountOfCounts = [[1, 2], [2, 1]];
  test('continuation counts below the highest order, raw counts at it', () => {
    expect(kneserNeyCountOfCounts({ order: 1, distinct: 3, total: 3, raw, continuation }, 3)).toEqual({ source: 'continuation', countOfCounts: continuation });
    expect(kneserNeyCountOfCounts({ order: 3, distinct: 3, total: 3, raw, continuation }, 3)).toEqual({ source: 'raw', countOfCounts: raw });
    expect(kneserNeyCountOfCounts({ order: 2, distinct: 3, total: 3, raw }, 3)).toEqual({ source: 'raw', countOfCounts: raw });
  });
});
