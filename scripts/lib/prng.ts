/**
 * A small seeded pseudo-random number generator for the data generators (sample data, synthetic
 * benchmark corpora). The same seed gives the same sequence on every run and every machine: the
 * state is one uint32 and every step uses only 32-bit integer arithmetic (`Math.imul`, shifts),
 * so nothing depends on the platform's floating point beyond the exact division by 2^32.
 *
 * The core step is mulberry32 (a 32-bit multiply-xorshift generator, period 2^32). That is plenty
 * for test and benchmark data; it is not meant for anything that needs statistical rigour beyond
 * "looks random", and never for anything security related.
 */

const TWO_POW_32 = 4294967296;

/** Mixes any integer seed into a well-spread 32-bit starting state (splitmix-style finaliser). */
export function mixSeed(seed: number, stream = 0): number {
  if (!Number.isSafeInteger(seed)) throw new RangeError(`seed must be a safe integer, got ${seed}`);
  if (!Number.isSafeInteger(stream)) throw new RangeError(`stream must be a safe integer, got ${stream}`);
  // Fold the high bits of a large seed into the low 32 so seeds above 2^32 stay distinct.
  let h = (seed >>> 0) ^ Math.floor(seed / TWO_POW_32);
  h = Math.imul(h ^ 0x9e3779b9, 0x85ebca6b) ^ Math.imul(stream + 0x632be5ab, 0xc2b2ae35);
  h ^= h >>> 16;
  h = Math.imul(h, 0x7feb352d);
  h ^= h >>> 15;
  h = Math.imul(h, 0x846ca68b);
  h ^= h >>> 16;
  return h >>> 0;
}

/** Seeded generator. Create one per independent stream (e.g. one per shard) with `mixSeed`. */
export class Prng {
  private state: number;

  /**
   * @param seed any safe integer; `stream` picks an independent sequence for the same seed, so
   *   shard k of a corpus can be generated on its own, in any order or in parallel.
   */
  constructor(seed: number, stream = 0) {
    this.state = mixSeed(seed, stream);
  }

  /** Next uint32 in [0, 2^32). */
  nextUint32(): number {
    this.state = (this.state + 0x6d2b79f5) | 0;
    let t = this.state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return (t ^ (t >>> 14)) >>> 0;
  }

  /** Next float in [0, 1), a multiple of 2^-32. */
  next(): number {
    return this.nextUint32() / TWO_POW_32;
  }

  /** Integer in [0, countMax) — `countMax` must be a positive integer ≤ 2^32. */
  int(countMax: number): number {
    if (!Number.isInteger(countMax) || countMax < 1 || countMax > TWO_POW_32) {
      throw new RangeError(`int(countMax): countMax must be an integer in [1, 2^32], got ${countMax}`);
    }
    return Math.floor(this.next() * countMax);
  }

  /** Integer in [low, high], both inclusive. */
  intBetween(low: number, high: number): number {
    if (!Number.isInteger(low) || !Number.isInteger(high) || high < low) {
      throw new RangeError(`intBetween(low, high): need integers with low ≤ high, got ${low}, ${high}`);
    }
    return low + this.int(high - low + 1);
  }

  /** True with probability `p` (0 ≤ p ≤ 1). */
  chance(p: number): boolean {
    if (!(p >= 0 && p <= 1)) throw new RangeError(`chance(p): p must be in [0, 1], got ${p}`);
    return this.next() < p;
  }

  /** One element of a non-empty array, uniformly. */
  pick<T>(items: readonly T[]): T {
    if (items.length === 0) throw new RangeError('pick(items): items must not be empty');
    return items[this.int(items.length)];
  }

  /** One element, chosen with probability proportional to its weight (weights ≥ 0, sum > 0). */
  weighted<T>(items: readonly T[], weights: readonly number[]): T {
    return items[this.weightedIndex(weights)];
  }

  /** An index into `weights`, chosen with probability proportional to the weight there. */
  weightedIndex(weights: readonly number[]): number {
    let total = 0;
    for (const w of weights) {
      if (!(w >= 0) || !Number.isFinite(w)) throw new RangeError(`weights must be finite and ≥ 0, got ${w}`);
      total += w;
    }
    if (!(total > 0)) throw new RangeError('weights must not all be zero');
    let target = this.next() * total;
    for (let index = 0; index < weights.length; index++) {
      target -= weights[index];
      if (target < 0) return index;
    }
    // Rounding can leave a sliver at the end: give it to the last positive weight.
    for (let index = weights.length - 1; index >= 0; index--) if (weights[index] > 0) return index;
    throw new Error('unreachable: total > 0 but no positive weight');
  }

  /** A new array with the items in a random order (Fisher–Yates). */
  shuffled<T>(items: readonly T[]): T[] {
    const out = items.slice();
    for (let index = out.length - 1; index > 0; index--) {
      const other = this.int(index + 1);
      const tmp = out[index];
      out[index] = out[other];
      out[other] = tmp;
    }
    return out;
  }
}

/**
 * Walker/Vose alias table: after O(n) set-up, draws an index with probability proportional to
 * its weight in O(1) using one uniform number. Used for the 200k-word Zipf draw of the synthetic
 * corpus, where a linear or even a binary search per token would dominate the run time.
 */
export class AliasTable {
  /** Number of outcomes. */
  readonly size: number;
  /** Interleaved per outcome: [acceptance probability, alias index], so one draw touches one cache line. */
  private readonly table: Float64Array;

  constructor(weights: ArrayLike<number>) {
    const count = weights.length;
    if (count < 1) throw new RangeError('AliasTable: weights must not be empty');
    let total = 0;
    for (let index = 0; index < count; index++) {
      const w = weights[index];
      if (!(w >= 0) || !Number.isFinite(w)) throw new RangeError(`AliasTable: weight ${index} is ${w}`);
      total += w;
    }
    if (!(total > 0)) throw new RangeError('AliasTable: weights must not all be zero');

    this.size = count;
    const table = new Float64Array(2 * count);
    const scaled = new Float64Array(count);
    const small = new Uint32Array(count);
    const large = new Uint32Array(count);
    let smallCount = 0;
    let largeCount = 0;
    for (let index = 0; index < count; index++) {
      scaled[index] = (weights[index] * count) / total;
      if (scaled[index] < 1) small[smallCount++] = index;
      else large[largeCount++] = index;
    }
    while (smallCount > 0 && largeCount > 0) {
      const less = small[--smallCount];
      const more = large[--largeCount];
      table[2 * less] = scaled[less];
      table[2 * less + 1] = more;
      scaled[more] = scaled[more] + scaled[less] - 1;
      if (scaled[more] < 1) small[smallCount++] = more;
      else large[largeCount++] = more;
    }
    // What is left is 1 up to rounding.
    while (largeCount > 0) {
      const index = large[--largeCount];
      table[2 * index] = 1;
      table[2 * index + 1] = index;
    }
    while (smallCount > 0) {
      const index = small[--smallCount];
      table[2 * index] = 1;
      table[2 * index + 1] = index;
    }
    this.table = table;
  }

  /** Draws one index. */
  draw(rng: Prng): number {
    return this.drawWith(rng.next());
  }

  /** The index that the uniform number `uniform` in [0, 1) selects (for callers that batch draws). */
  drawWith(uniform: number): number {
    const u = uniform * this.size;
    const index = Math.floor(u);
    return u - index < this.table[2 * index] ? index : this.table[2 * index + 1];
  }
}

/**
 * Draws from weights sorted in decreasing order (a Zipf-like law) with the same distribution as one
 * AliasTable over all of them, but faster: the outcomes are split into bands of growing size
 * (head, middle, tail), a band is chosen by its total weight, and the same uniform number, rescaled,
 * draws inside that band's own alias table. Most draws land in the small head table, which stays
 * in cache; one big table would cost a cache miss on nearly every draw.
 */
export class BandedSampler {
  readonly size: number;
  private readonly bandFirst: number[] = [];
  private readonly bandCumulative: number[] = [];
  private readonly bandMass: number[] = [];
  private readonly bands: AliasTable[] = [];

  /** @param bandEnds exclusive ends of all bands but the last, increasing (e.g. [4096, 65536]). */
  constructor(weights: ArrayLike<number>, bandEnds: readonly number[] = [4096, 65536]) {
    const count = weights.length;
    if (count < 1) throw new RangeError('BandedSampler: weights must not be empty');
    const ends = bandEnds.filter((end) => end < count).concat([count]);
    let total = 0;
    for (let index = 0; index < count; index++) total += weights[index];
    if (!(total > 0)) throw new RangeError('BandedSampler: weights must not all be zero');
    let first = 0;
    let cumulative = 0;
    for (const end of ends) {
      if (!(end > first)) throw new RangeError(`BandedSampler: bandEnds must increase, got ${bandEnds.join(', ')}`);
      const slice = Array.prototype.slice.call(weights, first, end) as number[];
      const mass = slice.reduce((sum, w) => sum + w, 0) / total;
      this.bandFirst.push(first);
      this.bandMass.push(mass);
      cumulative += mass;
      this.bandCumulative.push(cumulative);
      this.bands.push(new AliasTable(mass > 0 ? slice : slice.map(() => 1)));
      first = end;
    }
    this.bandCumulative[this.bandCumulative.length - 1] = 1; // absorb rounding
    this.size = count;
  }

  /** The index that the uniform number `uniform` in [0, 1) selects. */
  drawWith(uniform: number): number {
    let band = 0;
    while (uniform >= this.bandCumulative[band]) band++;
    const low = band === 0 ? 0 : this.bandCumulative[band - 1];
    const within = Math.min((uniform - low) / this.bandMass[band], 0.9999999999999999);
    return this.bandFirst[band] + this.bands[band].drawWith(within);
  }

  draw(rng: Prng): number {
    return this.drawWith(rng.next());
  }
}

/** Zipf-like weights 1 / (rank + offset)^exponent for ranks 1..count. */
export function zipfWeights(count: number, exponent = 1, offset = 0): Float64Array {
  if (!Number.isInteger(count) || count < 1) throw new RangeError(`zipfWeights: count must be a positive integer, got ${count}`);
  if (!(exponent >= 0)) throw new RangeError(`zipfWeights: exponent must be ≥ 0, got ${exponent}`);
  if (!(offset >= 0)) throw new RangeError(`zipfWeights: offset must be ≥ 0, got ${offset}`);
  const weights = new Float64Array(count);
  for (let rank = 1; rank <= count; rank++) weights[rank - 1] = 1 / Math.pow(rank + offset, exponent);
  return weights;
}
