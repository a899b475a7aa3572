/**
 * Quantisation of log10 values to 8 or 16 bits: a codebook of at most 2^bits values fitted to the
 * data, and each value replaced by the code of its nearest codebook value.
 *
 * The fit is one-dimensional k-means (Lloyd's algorithm) on the values, started from their
 * quantiles: the sorted values are cut into k runs of equal size and each centre starts at its
 * run's mean (a value repeated so often that it would fill a run starts a centre of its own, see
 * initialCentres); then, until no centre moves (at most QUANT_ITERATIONS_MAX times), every value goes to
 * its nearest centre (in one dimension the clusters are runs of the sorted values, split at the
 * midpoints between neighbouring centres) and each centre moves to its cluster's mean. It minimises
 * the squared error of the log10 values, which is what a sum of log10 probabilities accumulates.
 *
 * Exact cases: when the values take no more distinct values than there are codes, the codebook is
 * those values and nothing is lost; −∞ (probability 0, e.g. `<s>`'s unigram) takes a code of its
 * own, the first, and is never averaged with anything.
 *
 * Everything is deterministic: the same values give the same codebook and codes.
 */
import { assert } from '../errors.ts';
import { QUANT_FIT_VALUES_MAX, QUANT_ITERATIONS_MAX } from '../limits.ts';

/** A fitted codebook: ascending values, −∞ first when any value is −∞. */
export type Codebook = Float64Array;

/**
 * Fits a codebook of at most 2^bits values to `values` (finite or −∞), reading only the indices
 * for which `include` is 1 when it is given (the back-off weights of rows that are contexts).
 * With no value at all the codebook is [0].
 */
export function fitCodebook(values: Float64Array, bits: 8 | 16, include?: Uint8Array): Codebook {
  let finiteCount = 0;
  let negativeInfinity = false;
  for (let i = 0; i < values.length; i++) {
    if (include !== undefined && include[i] === 0) continue;
    const value = values[i];
    if (value === -Infinity) negativeInfinity = true;
    else {
      if (!Number.isFinite(value)) assert(false, `a value to quantise is finite or −∞ (got ${value})`);
      finiteCount++;
    }
  }
  const sorted = new Float64Array(finiteCount);
  let next = 0;
  for (let i = 0; i < values.length; i++) {
    if (include !== undefined && include[i] === 0) continue;
    if (values[i] !== -Infinity) sorted[next++] = values[i];
  }
  sorted.sort();
  const capacity = 2 ** bits - (negativeInfinity ? 1 : 0);

  let distinct = 0;
  for (let i = 0; i < sorted.length; i++) if (i === 0 || sorted[i] !== sorted[i - 1]) distinct++;
  let centres: Float64Array;
  if (distinct <= capacity) {
    centres = new Float64Array(distinct);
    let j = 0;
    for (let i = 0; i < sorted.length; i++) if (i === 0 || sorted[i] !== sorted[i - 1]) centres[j++] = sorted[i];
  } else {
    centres = lloyd(quantileSample(sorted), capacity);
  }
  if (!negativeInfinity && centres.length > 0) return centres;
  const codebook = new Float64Array(centres.length + (negativeInfinity ? 1 : 0) || 1);
  if (negativeInfinity) codebook[0] = -Infinity;
  codebook.set(centres, negativeInfinity ? 1 : 0);
  return codebook;
}

/** An evenly spaced sample of at most QUANT_FIT_VALUES_MAX sorted values (their quantiles), sorted. */
function quantileSample(sorted: Float64Array): Float64Array {
  if (sorted.length <= QUANT_FIT_VALUES_MAX) return sorted;
  const sample = new Float64Array(QUANT_FIT_VALUES_MAX);
  for (let i = 0; i < sample.length; i++) sample[i] = sorted[Math.floor(((i + 0.5) * sorted.length) / sample.length)];
  return sample;
}

/** k-means of sorted values into k centres (module comment); ascending, distinct. */
function lloyd(sorted: Float64Array, k: number): Float64Array {
  const n = sorted.length;
  assert(k >= 1 && n > k, 'k-means runs only when there are more values than centres');
  /** starts[c] .. starts[c+1]: the run of sorted values in cluster c. */
  let centres = initialCentres(sorted, k);
  const starts = new Uint32Array(k + 1);
  starts[k] = n;
  for (let iteration = 0; iteration < QUANT_ITERATIONS_MAX; iteration++) {
    // Boundaries: a value v goes to cluster c when midpoint(c−1, c) < v ≤ midpoint(c, c+1).
    let changed = iteration === 0;
    for (let c = 1; c < k; c++) {
      const midpoint = (centres[c - 1] + centres[c]) / 2;
      const start = upperBound(sorted, midpoint, starts[c - 1], n);
      if (start !== starts[c]) {
        starts[c] = start;
        changed = true;
      }
    }
    if (!changed) break;
    centres = runMeans(sorted, starts, k, centres);
  }
  // Centres of empty clusters were left where they were; drop duplicates and keep them ascending.
  const unique: number[] = [];
  for (let c = 0; c < k; c++) if (unique.length === 0 || centres[c] > unique[unique.length - 1]) unique.push(centres[c]);
  return Float64Array.from(unique);
}

/**
 * The starting centres: the quantiles of the values, except that a value repeated so often that it
 * would fill a whole quantile run (common: stupid backoff's and Katz's relative frequencies repeat,
 * 1/2, 1/3, …) gets a centre of its own, so that no two runs start on the same value and no code is
 * wasted. The other values are cut into equal runs, each starting at its mean. Ascending.
 */
function initialCentres(sorted: Float64Array, k: number): Float64Array {
  const n = sorted.length;
  // Runs of equal values: [runStarts[r], runStarts[r+1]).
  const runStartList: number[] = [];
  for (let i = 0; i < n; i++) if (i === 0 || sorted[i] !== sorted[i - 1]) runStartList.push(i);
  runStartList.push(n);
  const runStarts = Uint32Array.from(runStartList);
  const runs = runStarts.length - 1;
  assert(runs > k, 'more distinct values than centres');
  // Heavy runs: at least as long as a quantile run of the values left; repeat until none is added.
  const heavy = new Uint8Array(runs);
  let heavyCount = 0;
  let lightValues = n;
  for (;;) {
    const threshold = lightValues / (k - heavyCount);
    let added = 0;
    for (let r = 0; r < runs; r++) {
      const length = runStarts[r + 1] - runStarts[r];
      if (heavy[r] === 0 && length >= threshold && heavyCount + added + 1 < k) {
        heavy[r] = 1;
        added++;
        lightValues -= length;
      }
    }
    heavyCount += added;
    if (added === 0) break;
  }
  const lightCentres = k - heavyCount;
  const sums = new Float64Array(lightCentres);
  const sizes = new Float64Array(lightCentres);
  const centres: number[] = [];
  let position = 0;
  for (let r = 0; r < runs; r++) {
    if (heavy[r] === 1) {
      centres.push(sorted[runStarts[r]]);
      continue;
    }
    for (let i = runStarts[r]; i < runStarts[r + 1]; i++) {
      const c = Math.floor((position++ * lightCentres) / lightValues);
      sums[c] += sorted[i];
      sizes[c]++;
    }
  }
  for (let c = 0; c < lightCentres; c++) if (sizes[c] > 0) centres.push(sums[c] / sizes[c]);
  const result = Float64Array.from(centres).sort();
  // Pad (only when light runs came out empty, which the thresholds prevent) by repeating the last centre.
  const padded = new Float64Array(k).fill(result[result.length - 1]);
  padded.set(result);
  return padded;
}

/** The mean of each run [starts[c], starts[c+1]); an empty run keeps previous[c]. */
function runMeans(sorted: Float64Array, starts: Uint32Array, k: number, previous: Float64Array): Float64Array {
  const centres = new Float64Array(k);
  for (let c = 0; c < k; c++) {
    const start = starts[c];
    const end = starts[c + 1];
    if (end <= start) {
      centres[c] = previous[c];
      continue;
    }
    let sum = 0;
    for (let i = start; i < end; i++) sum += sorted[i];
    centres[c] = sum / (end - start);
  }
  // Keep centres ascending even where an empty cluster kept an old centre.
  for (let c = 1; c < k; c++) if (centres[c] < centres[c - 1]) centres[c] = centres[c - 1];
  return centres;
}

/** First index in [from, to) of ascending `sorted` whose value is > `value` (to when none). */
function upperBound(sorted: Float64Array, value: number, from: number, to: number): number {
  let low = from;
  let high = to;
  while (low < high) {
    const middle = (low + high) >>> 1;
    if (sorted[middle] <= value) low = middle + 1;
    else high = middle;
  }
  return low;
}

/**
 * The code of each value: the index of its nearest codebook value (the lower one on a tie); −∞ gets
 * the −∞ code. Indices for which `include` is 0 get code 0.
 */
export function encodeValues(values: Float64Array, codebook: Codebook, bits: 8 | 16, include?: Uint8Array): Uint8Array | Uint16Array {
  const codes = bits === 8 ? new Uint8Array(values.length) : new Uint16Array(values.length);
  assert(codebook.length >= 1 && codebook.length <= 2 ** bits, 'a codebook holds 1..2^bits values');
  const firstFinite = codebook[0] === -Infinity ? 1 : 0;
  const last = codebook.length - 1;
  for (let i = 0; i < values.length; i++) {
    if (include !== undefined && include[i] === 0) continue;
    const value = values[i];
    if (!(value === -Infinity || last >= firstFinite)) assert(false, 'a codebook fitted to finite values has finite codes');
    if (value === -Infinity) {
      assert(firstFinite === 1, 'a codebook fitted to −∞ values has a −∞ code');
      codes[i] = 0;
      continue;
    }
    // First codebook index ≥ value, then the nearer of it and the one before.
    let low = firstFinite;
    let high = last;
    while (low < high) {
      const middle = (low + high) >>> 1;
      if (codebook[middle] < value) low = middle + 1;
      else high = middle;
    }
    if (low > firstFinite && value - codebook[low - 1] <= codebook[low] - value) low--;
    codes[i] = low;
  }
  return codes;
}
