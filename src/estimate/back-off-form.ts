/**
 * The machinery every estimator shares: count tables prepared per order (cutoffs applied, contexts
 * found), and the construction of the back-off form from a per-context rule.
 *
 * An estimator supplies, for each order n, a rule that takes one context h of the order-n counts —
 * rows [start, end) of the order-n table, all n-grams h w seen in training, kept or dropped by the
 * cutoff — together with p(w | h') for each kept row (the model's own lower-order probability, or
 * 1/V at order 1), fills in p(w | h) for each kept row and returns h's back-off weight. For an
 * interpolated method p(w | h) = α(h, w) + γ(h)·p(w | h') and the weight is γ(h), so that the
 * back-off lookup (model.ts) reproduces the interpolated formula exactly: an unseen w gets
 * γ(h)·p(w | h'), and p(w | h') is itself what the lookup of the shorter context returns.
 *
 * Order 1 is the exception: its single context (the empty one) spans every vocabulary word, and the
 * rule fills p(w) for all of them, whether seen or not, folding in the uniform distribution where
 * the method interpolates with it. The model's order-1 table thus needs no back-off weight of its own.
 *
 * Cutoffs: an n-gram of order n with a raw count below cutoffs[n−1] is dropped. It stays in its
 * context's totals (c(h) and the like), and the rules move the mass it would have had to the
 * context's back-off weight, so p(· | h) still sums to 1 and the dropped n-grams are predicted
 * through the shorter context. Cutoffs must not decrease with the order: then the context and the
 * suffix of every kept n-gram are kept too (their counts are at least as large), which the back-off
 * form needs. Order 1 takes no cutoff (the vocabulary cap plays that part at count time).
 * A context all of whose n-grams are dropped gets weight 1: it then backs off entirely, as an
 * unseen context does, which is what its rule would give (all its mass moved down).
 */
import { assert, QuernError } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { mix32 } from '../count/hash.ts';
import { checkCountTables, rowCount, vocabularySize, type CountTables, type ModelVocabulary } from './counts.ts';
import type { LanguageModel, MethodParameters, ModelOrder } from './model.ts';
import { compareRow, contextStarts } from './rows.ts';

/** One order of counts, ready for estimation. */
export interface Level {
  order: number;
  rows: number;
  /** Rows of `order` ids. Order 1: every id 0..V (row = id), `<s>` included with count 0. */
  ids: Uint32Array;
  /** Raw counts; order 1: 0 for words never seen and for `<s>`. */
  counts: Float64Array;
  /** Continuation counts N1+(• x) where known (order 1: dense like `counts`); null otherwise. */
  continuation: Float64Array | null;
  /** 1 for rows that go into the model: count ≥ cutoff; order 1: every vocabulary word. */
  kept: Uint8Array;
  /** Context ranges: context j spans rows [contextStarts[j], contextStarts[j+1]). Order 1: [1, V+1). */
  contextStarts: Uint32Array;
  /** True for the highest order N. */
  highest: boolean;
  /** An array of at least `rows` entries that kneserNeyCounts fills instead of allocating one (the
   *  streaming driver's, reused from window to window); absent otherwise. */
  countsScratch?: Float64Array;
}

/** Count tables prepared for estimation. */
export interface PreparedCounts {
  order: number;
  vocabulary: ModelVocabulary;
  /** V. */
  size: number;
  cutoffs: number[];
  vocabularyCap: CountTables['vocabularyCap'];
  levels: Level[];
}

/** Options every estimator takes. */
export interface CutoffOptions {
  /**
   * Minimum raw count per order (index order−1), N entries: n-grams below it are dropped and their
   * mass goes to the lower order. Integers ≥ 1, the first 1, never decreasing. Default: all 1.
   */
  cutoffs?: readonly number[];
}

/** Checks `cutoffs` (see CutoffOptions) and returns them in full. */
export function checkCutoffs(cutoffs: readonly number[] | undefined, order: number): number[] {
  if (cutoffs === undefined) return new Array<number>(order).fill(1);
  if (cutoffs.length !== order) throw new QuernError('config', `cutoffs: give one minimum count per order, ${order} in all (got ${cutoffs.length})`);
  cutoffs.forEach((cutoff, index) => {
    if (!Number.isSafeInteger(cutoff) || cutoff < 1) throw new QuernError('config', `cutoffs: the minimum count of order ${index + 1} must be an integer ≥ 1 (got ${cutoff})`);
  });
  if (cutoffs[0] !== 1) {
    throw new QuernError('config', `cutoffs: order 1 takes no cutoff (got ${cutoffs[0]}); cap the vocabulary instead, which maps rare words to <unk>`);
  }
  for (let n = 2; n <= order; n++) {
    if (cutoffs[n - 1] < cutoffs[n - 2]) {
      throw new QuernError('config', `cutoffs: the minimum count of order ${n} (${cutoffs[n - 1]}) is below that of order ${n - 1} (${cutoffs[n - 2]}); they must not decrease with the order`);
    }
  }
  return [...cutoffs];
}

/**
 * The order-1 level from the unigram rows (`ids` ascending, `counts` and `continuation` aligned, the
 * latter null when absent): dense over every id 0..V, one context [1, V+1), `<s>` not kept.
 */
export function unigramLevel(ids: Uint32Array, counts: Float64Array, continuation: Float64Array | null, size: number, highest: boolean): Level {
  const all = new Uint32Array(size + 1);
  for (let id = 0; id <= size; id++) all[id] = id;
  const dense = new Float64Array(size + 1);
  const denseContinuation = continuation === null ? null : new Float64Array(size + 1);
  for (let row = 0; row < counts.length; row++) {
    dense[ids[row]] = counts[row];
    if (denseContinuation !== null) denseContinuation[ids[row]] = (continuation as Float64Array)[row];
  }
  const kept = new Uint8Array(size + 1).fill(1);
  kept[BOS_ID] = 0;
  return { order: 1, rows: size + 1, ids: all, counts: dense, continuation: denseContinuation, kept, contextStarts: Uint32Array.of(1, size + 1), highest };
}

/**
 * A level of order ≥ 2 over `rows` rows that hold whole contexts (all n-grams of each context, as
 * the whole table does, or a window of consecutive contexts as the streaming driver reads them):
 * rows kept by `cutoff`, contexts found.
 */
export function contextLevel(order: number, rows: number, ids: Uint32Array, counts: Float64Array, continuation: Float64Array | null, cutoff: number, highest: boolean, scratch?: LevelScratch): Level {
  assert(order >= 2 && ids.length >= rows * order && counts.length >= rows, 'a context level holds rows of its order');
  const kept = scratch === undefined ? new Uint8Array(rows) : scratch.kept.subarray(0, rows);
  for (let row = 0; row < rows; row++) kept[row] = counts[row] >= cutoff ? 1 : 0;
  return { order, rows, ids, counts, continuation, kept, contextStarts: contextStarts(ids, order, rows, scratch?.starts), highest, countsScratch: scratch?.counts };
}

/**
 * Arrays a caller that builds one level after another (the streaming driver's windows) lends
 * contextLevel instead of fresh ones per level: `kept` and `counts` at least rows long, `starts` rows + 1. The
 * level then lives only until the next one is built into them.
 */
export interface LevelScratch {
  kept: Uint8Array;
  starts: Uint32Array;
  /** Level.countsScratch, rows long. */
  counts: Float64Array;
}

/** Checks the tables, applies the cutoffs and finds the contexts of every order. */
export function prepareCounts(counts: CountTables, options: CutoffOptions = {}): PreparedCounts {
  checkCountTables(counts);
  const cutoffs = checkCutoffs(options.cutoffs, counts.order);
  const size = vocabularySize(counts.vocabulary);
  const levels: Level[] = counts.tables.map((table, index) => {
    const order = index + 1;
    const highest = order === counts.order;
    if (order === 1) return unigramLevel(table.ids, table.counts, table.continuation, size, highest);
    const rows = rowCount(table);
    return contextLevel(order, rows, table.ids, table.counts, table.continuation, cutoffs[index], highest);
  });
  let total = 0;
  for (let id = 1; id <= size; id++) total += levels[0].counts[id];
  if (total === 0) throw new QuernError('input', 'there is nothing to estimate from: the counts hold no sentence');
  return { order: counts.order, vocabulary: counts.vocabulary, size, cutoffs, vocabularyCap: counts.vocabularyCap, levels };
}

/**
 * The rule for one context (see the module comment): fills prob[row] for every kept row of
 * [start, end) (order 1: every row) given lower[row] = p(w | h') for those rows, and returns the
 * context's back-off weight (linear; ignored at order 1).
 */
export type ContextRule = (start: number, end: number, lower: Float64Array, prob: Float64Array) => number;

/** What the model records besides its tables. */
export interface ModelHeader {
  parameters: MethodParameters;
  normalised: boolean;
  log10UnseenContextWeight: number;
}

/** Slack for rounding when checking that probabilities lie in [0, 1]. */
const PROBABILITY_SLACK = 1e-9;

/** Largest probability a method may give, with slack for rounding. */
export function probabilityMaxOf(normalised: boolean): number {
  return normalised ? 1 + PROBABILITY_SLACK : Infinity;
}

/**
 * The order-1 pass, shared by both drivers: the rule over every vocabulary word with p(w | h') = 1/V;
 * returns p(w) by id (0 for `<s>`), each checked.
 */
export function estimateUnigrams(level: Level, rule: ContextRule, size: number, normalised: boolean): Float64Array {
  assert(level.order === 1 && level.rows === size + 1, 'the unigram level holds every id 0..V');
  const prob = new Float64Array(size + 1);
  const lower = new Float64Array(size + 1).fill(1 / size);
  rule(1, size + 1, lower, prob);
  prob[BOS_ID] = 0;
  for (let id = 1; id <= size; id++) checkProbability(prob[id], normalised, 1);
  return prob;
}

/**
 * One context of order ≥ 2 through its rule, shared by both drivers: fills prob[row] for the kept
 * rows of [start, end) from lower[row], checks them, and returns the context's back-off weight.
 */
export function applyContextRule(level: Level, rule: ContextRule, start: number, end: number, lower: Float64Array, prob: Float64Array, normalised: boolean): number {
  const weight = rule(start, end, lower, prob);
  if (!(Number.isFinite(weight) && weight >= 0)) assert(false, `a back-off weight is finite and ≥ 0 (got ${weight})`);
  const probabilityMax = probabilityMaxOf(normalised);
  for (let row = start; row < end; row++) {
    const p = prob[row];
    if (level.kept[row] === 1 && !(p >= 0 && p <= probabilityMax)) checkProbability(p, normalised, level.order);
  }
  return weight;
}

/** log10 of a back-off weight as the model stores it: exactly 0 for a weight of 1. */
export function log10BackOffOf(weight: number): number {
  return weight === 1 ? 0 : Math.log10(weight);
}

/** Entries of a BackOffLog10Memo (a power of two). */
const BACK_OFF_MEMO_ENTRIES = 4096;

/**
 * log10BackOffOf with the answers for recent weights kept: a direct-mapped table indexed by a hash
 * of the weight's bits. A context's weight is (Σ discounts + dropped counts) / c(h) of small counts
 * mostly, so the same few thousand values come back for most of the millions of contexts, and
 * Math.log10 (a call into V8's fdlibm port: 7.5% of a partition's profile, rows' probabilities and
 * contexts' weights together) runs once per distinct weight instead. The answer is the very number
 * log10BackOffOf gives.
 */
export class BackOffLog10Memo {
  private readonly weights = new Float64Array(BACK_OFF_MEMO_ENTRIES).fill(NaN);
  private readonly logs = new Float64Array(BACK_OFF_MEMO_ENTRIES);
  private readonly bits = new Float64Array(1);
  private readonly words = new Uint32Array(this.bits.buffer);

  log10(weight: number): number {
    this.bits[0] = weight;
    const slot = mix32(this.words[0] ^ Math.imul(this.words[1], 0x9e3779b1)) & (BACK_OFF_MEMO_ENTRIES - 1);
    if (this.weights[slot] === weight) return this.logs[slot];
    const log = log10BackOffOf(weight);
    this.weights[slot] = weight;
    this.logs[slot] = log;
    return log;
  }
}

/**
 * Builds the back-off form: order by order, every context through `ruleFor(level)`, then the
 * kept rows of each order into the model's table with log10 probabilities and back-off weights.
 */
export function buildBackOffModel(prepared: PreparedCounts, ruleFor: (level: Level) => ContextRule, header: ModelHeader): LanguageModel {
  const { levels, size } = prepared;
  const probabilities: Float64Array[] = [];
  const backOffs: Float64Array[] = [];
  /** Per order ≥ 2 (index order − 2): each kept row's context row in the shorter level. */
  const contextRowsOf: Int32Array[] = [];
  /** Per order ≥ 2 (index order − 2): each kept row's suffix row in the shorter level. */
  const suffixRowsOf: Int32Array[] = [];
  /** Per order ≥ 2 (index order − 2): for each row of the shorter level, the first row of the
   *  context it is in this level (−1 when it is no context). */
  const childStartsOf: Int32Array[] = [];
  /** … and the end of that context. */
  const childEndsOf: Int32Array[] = [];
  for (const level of levels) {
    probabilities.push(new Float64Array(level.rows));
    backOffs.push(new Float64Array(level.rows).fill(1));
  }

  for (const level of levels) {
    const n = level.order;
    const rule = ruleFor(level);
    const prob = probabilities[n - 1];
    if (n === 1) {
      prob.set(estimateUnigrams(level, rule, size, header.normalised));
      continue;
    }
    const lower = new Float64Array(level.rows);
    const shorter = levels[n - 2];
    const shorterProb = probabilities[n - 2];
    const shorterBackOff = backOffs[n - 2];
    const contextRows = new Int32Array(level.rows).fill(-1);
    const suffixRows = new Int32Array(level.rows).fill(-1);
    const childStarts = new Int32Array(shorter.rows).fill(-1);
    const childEnds = new Int32Array(shorter.rows).fill(-1);
    contextRowsOf.push(contextRows);
    suffixRowsOf.push(suffixRows);
    childStartsOf.push(childStarts);
    childEndsOf.push(childEnds);
    const starts = level.contextStarts;
    // Contexts ascend, and so do their rows in the shorter table: one walk finds them all.
    let contextRow = 0;
    for (let context = 0; context + 1 < starts.length; context++) {
      const start = starts[context];
      const end = starts[context + 1];
      let keptRows = 0;
      for (let row = start; row < end; row++) keptRows += level.kept[row];
      if (keptRows === 0) continue; // backs off entirely (module comment)
      while (contextRow < shorter.rows && compareRow(shorter.ids, n - 1, contextRow, level.ids, start * n, n - 1) < 0) contextRow++;
      if (!(contextRow < shorter.rows && compareRow(shorter.ids, n - 1, contextRow, level.ids, start * n, n - 1) === 0 && (shorter.kept[contextRow] === 1 || (n === 2 && contextRow === BOS_ID)))) {
        assert(false, `the context of a kept n-gram of order ${n} is kept`);
      }
      childStarts[contextRow] = start;
      childEnds[contextRow] = end;
      // The suffixes h' w of the rows share h' and ascend in w, as the rows of h' in the shorter
      // table do (their range was recorded when the shorter order was built): a galloping search
      // forward from the last suffix finds each, in time logarithmic in the rows it skips.
      let suffix = 0;
      let suffixEnd = 0;
      if (n > 2) {
        const parent = suffixRowsOf[n - 3][contextRow];
        suffix = childStartsOf[n - 3][parent];
        suffixEnd = childEndsOf[n - 3][parent];
      }
      for (let row = start; row < end; row++) {
        if (level.kept[row] === 0) continue;
        const word = level.ids[row * n + n - 1];
        if (n === 2) suffix = word;
        else suffix = gallop(shorter.ids, n - 1, suffix, suffixEnd, word);
        // Within h''s rows (or, at order 2, the unigram row of the word), the row found ends in the word.
        if (!(suffix >= 0 && (n === 2 || suffix < suffixEnd) && shorter.ids[suffix * (n - 1) + n - 2] === word && shorter.kept[suffix] === 1)) {
          assert(false, `the suffix of a kept n-gram of order ${n} is kept at order ${n - 1}`);
        }
        lower[row] = shorterProb[suffix];
        contextRows[row] = contextRow;
        suffixRows[row] = suffix;
      }
      shorterBackOff[contextRow] = applyContextRule(level, rule, start, end, lower, prob, header.normalised);
    }
  }

  const orders: ModelOrder[] = [];
  let previousIndex: Int32Array | null = null;
  for (const level of levels) {
    const n = level.order;
    const index = new Int32Array(level.rows).fill(-1);
    let rows = 0;
    for (let row = 0; row < level.rows; row++) if (level.kept[row] === 1 || (n === 1 && row === BOS_ID)) index[row] = rows++;
    const ids = new Uint32Array(rows * n);
    const log10Prob = new Float64Array(rows);
    const log10BackOff = new Float64Array(rows);
    const contextRow = new Uint32Array(n === 1 ? 0 : rows);
    for (let row = 0; row < level.rows; row++) {
      const target = index[row];
      if (target < 0) continue;
      for (let i = 0; i < n; i++) ids[target * n + i] = level.ids[row * n + i];
      log10Prob[target] = Math.log10(probabilities[n - 1][row]);
      log10BackOff[target] = log10BackOffOf(backOffs[n - 1][row]);
      if (n > 1) contextRow[target] = (previousIndex as Int32Array)[contextRowsOf[n - 2][row]];
    }
    orders.push({ order: n, ids, log10Prob, log10BackOff, contextRow });
    previousIndex = index;
  }

  return {
    order: prepared.order,
    vocabulary: prepared.vocabulary,
    normalised: header.normalised,
    parameters: header.parameters,
    cutoffs: prepared.cutoffs,
    vocabularyCap: prepared.vocabularyCap,
    log10UnseenContextWeight: header.log10UnseenContextWeight,
    orders,
  };
}

/**
 * First row in [from, end) of an order-`order` table whose last id is ≥ `word`, where the rows of
 * [from, end) share their first order−1 ids (so their last ids ascend): exponential steps forward,
 * then a binary search.
 */
export function gallop(ids: Uint32Array, order: number, from: number, end: number, word: number): number {
  const last = order - 1;
  if (from >= end || ids[from * order + last] >= word) return from;
  let low = from; // ids at low < word
  let step = 1;
  let high = from + step;
  while (high < end && ids[high * order + last] < word) {
    low = high;
    step *= 2;
    high = from + step;
  }
  if (high > end) high = end;
  // ids at low < word; at high ≥ word (or high = end)
  while (high - low > 1) {
    const middle = (low + high) >>> 1;
    if (ids[middle * order + last] < word) low = middle;
    else high = middle;
  }
  return high;
}

function checkProbability(p: number, normalised: boolean, order: number): void {
  if (!(Number.isFinite(p) && p >= 0 && (!normalised || p <= 1 + PROBABILITY_SLACK))) assert(false, `order ${order}: a probability lies in [0, 1] (got ${p})`);
}

/**
 * The rule of the discounted interpolated methods (absolute discounting, Kneser-Ney, modified
 * Kneser-Ney), on the counts c the method uses at this order:
 *
 *   p(w | h) = max(c(h w) − D(c(h w)), 0) / c(h) + γ(h)·p(w | h'),
 *   γ(h)     = (Σ_kept D(c(h w)) + Σ_dropped c(h w)) / c(h),      c(h) = Σ_w c(h w) over all rows,
 *
 * where D(c) is the discount for an n-gram of count c (D(0) = 0). Σ_w p(w | h) = 1.
 */
export function discountedRule(level: Level, counts: Float64Array, discount: (count: number) => number): ContextRule {
  return (start, end, lower, prob) => {
    let total = 0;
    for (let row = start; row < end; row++) total += counts[row];
    if (!(total > 0)) assert(false, `order ${level.order}: a context has a positive total count`);
    let mass = 0;
    for (let row = start; row < end; row++) {
      const count = counts[row];
      if (level.kept[row] === 0) {
        mass += count;
        continue;
      }
      const taken = count === 0 ? 0 : Math.min(discount(count), count);
      prob[row] = (count - taken) / total;
      mass += taken;
    }
    const weight = mass / total;
    for (let row = start; row < end; row++) if (level.kept[row] === 1) prob[row] += weight * lower[row];
    return weight;
  };
}
