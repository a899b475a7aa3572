/**
 * A language model in back-off form, and the lookup that reads it.
 *
 * Per order n = 1..N, a table of rows (sorted word-id tuples, see rows.ts) with
 *  - log10Prob: for every n-gram kept from training, log10 p(w | h) (h its first n−1 ids, w its last);
 *  - log10BackOff: for every row that is a context of order n+1, log10 of its back-off weight;
 *    0 (a weight of 1) for the rows that are not;
 *  - contextRow (orders ≥ 2): the row of the n-gram's context in the order n−1 table.
 * The order-1 table holds every id 0..V in id order (row = id): every vocabulary word has a
 * unigram probability, and `<s>` (id 0), never predicted, has log10Prob = −∞ and carries the
 * back-off weight of the context `<s>`.
 *
 * Lookup (DESIGN.md, "Language-model conventions"): the history is the last min(N−1, i) tokens;
 *
 *   p(w | h) = p_stored(h w)                 when h w is in the model,
 *            = bow(h) · p(w | h')            when h is a context of the model (h' = h without its first word),
 *            = p(w | h')                     when h was never seen as a context: it backs off entirely.
 *
 * (Stupid backoff, whose scores follow Brants et al. 2007, multiplies by α on every step, seen
 * context or not: `log10UnseenContextWeight` = log10 α there, 0 for every normalised model.)
 *
 * At most N probes: one binary search per order from the longest context down. When the n-gram
 * h w is absent from the order-n table, its would-be neighbours tell whether h is a context (all
 * rows starting with h are contiguous), and their `contextRow` points at h's back-off weight, so
 * no second search is needed.
 */
import { assert } from '../errors.ts';
import type { VocabCap } from '../corpus/vocabulary.ts';
import type { NormalizeOptions } from '../corpus/types.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { vocabularySize, type ModelVocabulary } from './counts.ts';
import { compareRow, searchRows } from './rows.ts';

/** Smoothing methods. */
export type ModelMethod =
  | 'modified-kneser-ney'
  | 'kneser-ney'
  | 'absolute-discounting'
  | 'katz'
  | 'witten-bell'
  | 'jelinek-mercer'
  | 'stupid-backoff'
  | 'uniform';

/** Where the discounts of an order came from. */
export type DiscountSource =
  /** read off the count-of-counts by the published formula */
  | 'counts'
  /** given by the user */
  | 'given'
  /** the documented fallback values (the counts' values could not be used, and the user allowed it) */
  | 'fallback'
  /** the order has no n-grams, so no discount is ever applied */
  | 'unused';

/** The discounts of one order, with what they were read from. */
export interface OrderDiscounts {
  order: number;
  /** Names of the values, e.g. ['D1', 'D2', 'D3+'], ['D'], ['d1', …, 'd5']. */
  names: string[];
  /** The discounts used (empty when unused). */
  values: number[];
  source: DiscountSource;
  /** What the formula gave from the counts (null: undefined), whatever was used. */
  fromCounts: Array<number | null>;
  /** Why the values from the counts could not be used (undefined or out of range); empty if they could. */
  problems: string[];
  /** Which counts the count-of-counts came from. */
  counts: 'raw' | 'continuation';
  /** The count-of-counts the formula read, e.g. { n1: 120, n2: 40, … }. */
  countOfCounts: Record<string, number>;
}

/** Held-out fit of Jelinek-Mercer interpolation weights (see jelinek-mercer.ts). */
export interface InterpolationWeights {
  /** True when weights depend on the bucket of the context count, false for one weight per order. */
  bucketed: boolean;
  /** Per order 1..N: the weight λ of the order's maximum-likelihood estimate, by context-count bucket. */
  orders: Array<{ order: number; buckets: InterpolationBucket[] }>;
  /** EM iterations run. */
  iterations: number;
  /** Held-out log10 likelihood before the first iteration and after each one. */
  heldOutLog10Likelihood: number[];
  /** Held-out tokens the weights were fitted on (predicted tokens, `</s>` included). */
  heldOutTokens: number;
}

/** One bucket of contexts: those whose count c(h) satisfies countMin ≤ c(h) < countEnd. */
export interface InterpolationBucket {
  countMin: number;
  /** Exclusive; null for no upper end. */
  countEnd: number | null;
  /** λ, in [0, 1]. */
  weight: number;
  /** Held-out tokens whose context at this order fell in the bucket (0: λ is the order's own). */
  heldOutTokens: number;
}

/** Method and its parameters, as estimated. */
export type MethodParameters =
  | { method: 'modified-kneser-ney'; discounts: OrderDiscounts[] }
  | { method: 'kneser-ney'; discounts: OrderDiscounts[] }
  | { method: 'absolute-discounting'; discounts: OrderDiscounts[] }
  | {
      method: 'katz';
      k: number;
      discounts: OrderDiscounts[];
      /** How the unigram level's left-over mass was placed (see katz.ts). */
      unigramLevel: 'unseen-words' | 'renormalised';
      /** Per order 1..N: contexts whose counts all exceed k, discounted by (1 − d_k)·k each (see katz.ts). */
      contextsDiscountedAboveK: Array<{ order: number; contexts: number }>;
      /** Per order 2..N: contexts left with no mass for unseen words (only when d_k = 1, see katz.ts). */
      contextsWithoutMass: Array<{ order: number; contexts: number }>;
    }
  | { method: 'witten-bell' }
  | { method: 'jelinek-mercer'; weights: InterpolationWeights }
  | { method: 'stupid-backoff'; alpha: number }
  | { method: 'uniform' }
  /** A back-off model read from an ARPA file that does not say how it was estimated. */
  | { method: 'imported' };

/** One order of a model (see the module comment). */
export interface ModelOrder {
  order: number;
  /** Rows of `order` ids, sorted ascending. Order 1: ids 0..V, row = id. */
  ids: Uint32Array;
  log10Prob: Float64Array;
  log10BackOff: Float64Array;
  /** Orders ≥ 2: row of each n-gram's first order−1 ids in the order−1 table; empty for order 1. */
  contextRow: Uint32Array;
}

/** A language model in back-off form. */
export interface LanguageModel {
  /** Highest order N. */
  order: number;
  vocabulary: ModelVocabulary;
  /** False for stupid backoff: scores, not probabilities; perplexity and anything that needs a
   *  normalised model refuse it. */
  normalised: boolean;
  parameters: MethodParameters;
  /** Minimum raw count per order (index order−1); n-grams below it were dropped. */
  cutoffs: number[];
  /** The vocabulary cap applied at count time; null when none. */
  vocabularyCap: VocabCap | null;
  /** How the training text was normalised into tokens (the count's --lowercase, --unicode,
   *  --split), so text to score can be normalised the same way; absent when unknown. */
  normalize?: NormalizeOptions;
  /** log10 weight of backing off from a context never seen in training: 0 (DESIGN.md: backs off
   *  entirely) except stupid backoff (log10 α). */
  log10UnseenContextWeight: number;
  /** orders[n − 1] is the table of order n. */
  orders: ModelOrder[];
}

/** Result of a lookup. */
export interface LookupResult {
  /** log10 p(w | h) (a log10 score for a model that is not normalised); −∞ for probability 0. */
  log10Prob: number;
  /** The order of the n-gram that answered: the longest h w found in the model. */
  order: number;
  /** Binary searches made; at most N. */
  probes: number;
}

/** Rows of a model table. */
export function modelRowCount(table: ModelOrder): number {
  return table.log10Prob.length;
}

/**
 * log10 p(word | history) by the back-off rule of the module comment. `history` is the tokens
 * before `word` in the wrapped sentence (`<s>` first, OOV words as `<unk>`); only its last N−1
 * are read. `word` is a vocabulary id in [1, V] (never `<s>`).
 */
export function logProb(model: LanguageModel, history: ArrayLike<number>, word: number): LookupResult {
  const size = vocabularySize(model.vocabulary);
  if (!Number.isInteger(word) || word < 1 || word > size) throw new RangeError(`word must be a vocabulary id in [1, ${size}] (got ${word})`);
  const contextLength = Math.min(model.order - 1, history.length);
  const key = new Array<number>(contextLength + 1);
  for (let i = 0; i < contextLength; i++) key[i] = history[history.length - contextLength + i];
  key[contextLength] = word;

  let backOff = 0;
  let probes = 0;
  for (let k = contextLength; k >= 1; k--) {
    const n = k + 1;
    const table = model.orders[n - 1];
    const start = contextLength - k;
    const rows = modelRowCount(table);
    probes++;
    const found = searchRows(table.ids, n, rows, key, start);
    if (found >= 0) return { log10Prob: backOff + table.log10Prob[found], order: n, probes };
    const insertion = -found - 1;
    const context = neighbourContextRow(table, rows, key, start, insertion);
    backOff += context >= 0 ? model.orders[n - 2].log10BackOff[context] : model.log10UnseenContextWeight;
  }
  probes++;
  return { log10Prob: backOff + model.orders[0].log10Prob[word], order: 1, probes };
}

/** The context row of a neighbour of `insertion` that starts with key[start .. start+n−1), or −1. */
function neighbourContextRow(table: ModelOrder, rows: number, key: ArrayLike<number>, start: number, insertion: number): number {
  const n = table.order;
  for (const row of [insertion - 1, insertion]) {
    if (row < 0 || row >= rows) continue;
    let shares = true;
    for (let i = 0; i < n - 1 && shares; i++) shares = table.ids[row * n + i] === key[start + i];
    if (shares) return table.contextRow[row];
  }
  return -1;
}

/**
 * log10 p of every predicted token of one sentence (word ids, OOV words already `<unk>`), `</s>`
 * last: the sentence is wrapped as `<s> w1 … wm </s>` and token i is looked up with history
 * tokens 0..i−1 (of which the lookup reads the last N−1).
 */
export function sentenceLogProbs(model: LanguageModel, words: ArrayLike<number>): number[] {
  const wrapped = [BOS_ID];
  for (let i = 0; i < words.length; i++) wrapped.push(words[i]);
  wrapped.push(model.vocabulary.eosId);
  const result: number[] = [];
  for (let i = 1; i < wrapped.length; i++) result.push(logProb(model, wrapped.slice(Math.max(0, i - model.order + 1), i), wrapped[i]).log10Prob);
  return result;
}

/** A model that gives every vocabulary word the same probability 1/V: the baseline of no knowledge. */
export function uniformModel(vocabulary: ModelVocabulary): LanguageModel {
  const size = vocabularySize(vocabulary);
  assert(size >= 1, 'a vocabulary holds at least </s> and <unk>');
  const ids = new Uint32Array(size + 1);
  const log10Prob = new Float64Array(size + 1);
  for (let id = 0; id <= size; id++) {
    ids[id] = id;
    log10Prob[id] = id === BOS_ID ? -Infinity : -Math.log10(size);
  }
  return {
    order: 1,
    vocabulary,
    normalised: true,
    parameters: { method: 'uniform' },
    cutoffs: [1],
    vocabularyCap: null,
    log10UnseenContextWeight: 0,
    orders: [{ order: 1, ids, log10Prob, log10BackOff: new Float64Array(size + 1), contextRow: new Uint32Array(0) }],
  };
}

/**
 * Asserts the documented shape of a model: tables sorted, order 1 complete, each context row of an
 * n-gram is its prefix, probabilities ≤ 1 for a normalised model.
 */
export function checkModel(model: LanguageModel): void {
  const size = vocabularySize(model.vocabulary);
  assert(model.orders.length === model.order, 'model: one table per order');
  const unigrams = model.orders[0];
  assert(modelRowCount(unigrams) === size + 1, 'model: the order-1 table holds every id 0..V');
  for (let id = 0; id <= size; id++) assert(unigrams.ids[id] === id, 'model: order-1 row = id');
  for (let n = 2; n <= model.order; n++) {
    const table = model.orders[n - 1];
    const lower = model.orders[n - 2];
    const rows = modelRowCount(table);
    assert(table.ids.length === rows * n && table.contextRow.length === rows, `model: order ${n} arrays aligned`);
    for (let row = 0; row < rows; row++) {
      if (!(row === 0 || compareRow(table.ids, n, row - 1, table.ids, row * n, n) < 0)) assert(false, `model: order ${n} rows sorted and distinct`);
      const context = table.contextRow[row];
      for (let i = 0; i < n - 1; i++) if (!(lower.ids[context * (n - 1) + i] === table.ids[row * n + i])) assert(false, `model: order ${n} context rows point at the prefix`);
    }
  }
}
