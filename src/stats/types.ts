/**
 * Inputs of the statistics stage: what the merge keeps per order while it writes the store.
 * Count-of-counts are sparse: [r, n_r] pairs for every r with n_r > 0, ascending in r
 * (a corpus of N tokens has at most about √(2N) distinct r values, so this stays small).
 */

/** [r, n_r]: n_r distinct n-grams were seen exactly r times. Ascending r, n_r > 0. */
export type CountOfCounts = Array<[number, number]>;

export interface OrderStatsInput {
  order: number;
  /** Distinct n-grams of this order. */
  distinct: number;
  /** Σ of their counts (n-gram occurrences). */
  total: number;
  /** Count-of-counts of the raw counts. */
  raw: CountOfCounts;
  /**
   * Count-of-counts of the counts Kneser-Ney uses at this order when it is a lower order:
   * continuation counts N1+(• w…) for n-grams not starting with `<s>`, raw counts for those that do.
   * Absent for the highest order (which uses raw counts).
   */
  continuation?: CountOfCounts;
  /** Count-of-counts of the contexts (the first order−1 words), by Σ of the counts of their
   *  n-grams; absent for order 1. */
  contexts?: CountOfCounts;
}

export interface StatsInput {
  /** Highest order of the job. */
  order: number;
  /** Vocabulary size V, with `</s>` and `<unk>`, without `<s>`. */
  vocabularySize: number;
  /** Word tokens read (without `<s>` and `</s>`). */
  tokens: number;
  sentences: number;
  /** Unigram counts of the vocabulary in id order (ids rank by count), for the Zipf fit. */
  unigramCounts: number[];
  orders: OrderStatsInput[];
}
