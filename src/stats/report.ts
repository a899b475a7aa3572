/**
 * Builds the statistics report of a job from what the merge recorded (`StatsInput`): per order the
 * sizes, count-of-counts, Good-Turing and Simple Good-Turing estimates, the discounts each smoothing
 * method would use, and diagnostics in plain words. The `Report` is plain data (numbers as numbers,
 * null where a value is undefined), written as report.json and rendered as text and HTML.
 * Every field is documented in docs/report-schema.md; change both together and bump
 * REPORT_SCHEMA_VERSION when a field changes meaning or goes away.
 */
import { assert } from '../errors.ts';
import { ORDER_MAX } from '../limits.ts';
import { checkCountOfCounts, summariseCountOfCounts, type CountOfCountsSummary } from './count-of-counts.ts';
import { diagnose, type Diagnostic } from './diagnostics.ts';
import {
  absoluteDiscount,
  katzDiscounts,
  kneserNeyCountOfCounts,
  modifiedKneserNeyDiscounts,
  type AbsoluteDiscount,
  type KatzDiscounts,
  type KneserNeySource,
  type ModifiedKneserNeyDiscounts,
} from './discounts.ts';
import { goodTuringEstimates, simpleGoodTuring, unseenMass, type GoodTuringEstimate, type SimpleGoodTuring } from './good-turing.ts';
import type { OrderStatsInput, StatsInput } from './types.ts';
import { fitZipf, type ZipfFit } from './zipf.ts';

/** Version of the report's field layout (docs/report-schema.md). */
export const REPORT_SCHEMA_VERSION = 1;

/** Size of the job's corpus and model. */
export interface ReportCorpus {
  highestOrder: number;
  vocabularySize: number;
  tokens: number;
  sentences: number;
}

/** The contexts of an order (its first order − 1 words), by the summed counts of their n-grams. */
export interface ContextsReport {
  countOfCounts: CountOfCountsSummary;
  /** Share of the distinct contexts seen once; null when there are none. */
  seenOnceShare: number | null;
}

/** Discounts of one order, per smoothing method. */
export interface OrderDiscounts {
  /** Katz d_r from the raw counts. */
  katz: KatzDiscounts;
  /** Absolute discount D from the raw counts. */
  absolute: AbsoluteDiscount;
  /** Which counts the modified Kneser-Ney discounts come from at this order. */
  kneserNeySource: KneserNeySource;
  modifiedKneserNey: ModifiedKneserNeyDiscounts;
}

/** Everything the report says about one order. */
export interface OrderReport {
  order: number;
  /** Distinct n-grams. */
  distinct: number;
  /** Σ of their counts. */
  total: number;
  /** log10 of V^order, the number of possible n-grams; null when V = 0. */
  possibleLog10: number | null;
  /** log10 of distinct / V^order; null when distinct = 0 or V = 0. */
  observedShareLog10: number | null;
  /** distinct / V^order as a float (0 when it underflows); null when distinct = 0 or V = 0. */
  observedShare: number | null;
  /** Good-Turing mass of unseen n-grams, n_1/N of the raw counts; null when N = 0. */
  unseenMass: number | null;
  raw: CountOfCountsSummary;
  continuation: CountOfCountsSummary | null;
  contexts: ContextsReport | null;
  /** Plain Good-Turing r* for r = 1..5, raw counts. */
  goodTuring: GoodTuringEstimate[];
  /** Simple Good-Turing fit of the raw counts. */
  simpleGoodTuring: SimpleGoodTuring;
  discounts: OrderDiscounts;
}

/** The statistics report of a job. */
export interface Report {
  schemaVersion: number;
  corpus: ReportCorpus;
  /** Findings, most severe first. */
  diagnostics: Diagnostic[];
  /** One entry per order, ascending. */
  orders: OrderReport[];
  /** Zipf fit of the unigram counts; null with fewer than two words seen. */
  zipf: ZipfFit | null;
}

/** Checks the merge's bookkeeping (programmer errors: assertions). */
function checkInput(input: StatsInput): void {
  assert(Number.isInteger(input.order) && input.order >= 1 && input.order <= ORDER_MAX, `order ${input.order} must be in 1..${ORDER_MAX}`);
  assert(Number.isSafeInteger(input.vocabularySize) && input.vocabularySize >= 0, 'vocabularySize must be an integer ≥ 0');
  assert(input.orders.length === input.order, `orders must hold one entry per order 1..${input.order}`);
  input.orders.forEach((entry, index) => {
    assert(entry.order === index + 1, `orders[${index}].order must be ${index + 1}`);
    const what = `order ${entry.order}`;
    checkCountOfCounts(entry.raw, `${what} raw`);
    const raw = summariseCountOfCounts(entry.raw);
    assert(raw.types === entry.distinct, `${what}: Σ n_r of the raw counts (${raw.types}) must equal distinct (${entry.distinct})`);
    assert(raw.occurrences === entry.total, `${what}: Σ r·n_r (${raw.occurrences}) must equal total (${entry.total})`);
    if (entry.continuation !== undefined) {
      checkCountOfCounts(entry.continuation, `${what} continuation`);
      const continuation = summariseCountOfCounts(entry.continuation);
      assert(continuation.types === entry.distinct, `${what}: Σ n_r of the continuation counts (${continuation.types}) must equal distinct (${entry.distinct})`);
    }
    if (entry.contexts !== undefined) {
      assert(entry.order >= 2, 'order 1 has no contexts');
      checkCountOfCounts(entry.contexts, `${what} contexts`);
      const contexts = summariseCountOfCounts(entry.contexts);
      assert(contexts.occurrences === entry.total, `${what}: the context counts must sum to total (${contexts.occurrences} ≠ ${entry.total})`);
    }
  });
}

/** The report section of one order. */
function orderReport(entry: OrderStatsInput, input: StatsInput): OrderReport {
  const vocabularyLog10 = input.vocabularySize > 0 ? Math.log10(input.vocabularySize) : null;
  const possibleLog10 = vocabularyLog10 === null ? null : entry.order * vocabularyLog10;
  const observedShareLog10 = possibleLog10 === null || entry.distinct === 0 ? null : Math.log10(entry.distinct) - possibleLog10;
  const kneserNey = kneserNeyCountOfCounts(entry, input.order);
  let contexts: ContextsReport | null = null;
  if (entry.contexts !== undefined) {
    const summary = summariseCountOfCounts(entry.contexts);
    contexts = { countOfCounts: summary, seenOnceShare: summary.singletonShare };
  }
  return {
    order: entry.order,
    distinct: entry.distinct,
    total: entry.total,
    possibleLog10,
    observedShareLog10,
    observedShare: observedShareLog10 === null ? null : 10 ** observedShareLog10,
    unseenMass: unseenMass(entry.raw),
    raw: summariseCountOfCounts(entry.raw),
    continuation: entry.continuation === undefined ? null : summariseCountOfCounts(entry.continuation),
    contexts,
    goodTuring: goodTuringEstimates(entry.raw),
    simpleGoodTuring: simpleGoodTuring(entry.raw),
    discounts: {
      katz: katzDiscounts(entry.raw),
      absolute: absoluteDiscount(entry.raw),
      kneserNeySource: kneserNey.source,
      modifiedKneserNey: modifiedKneserNeyDiscounts(kneserNey.countOfCounts),
    },
  };
}

/** Builds the report of `input` (see the module comment). */
export function buildReport(input: StatsInput): Report {
  checkInput(input);
  const orders = input.orders.map((entry) => orderReport(entry, input));
  const zipf = fitZipf(input.unigramCounts);
  const corpus: ReportCorpus = {
    highestOrder: input.order,
    vocabularySize: input.vocabularySize,
    tokens: input.tokens,
    sentences: input.sentences,
  };
  return { schemaVersion: REPORT_SCHEMA_VERSION, corpus, diagnostics: diagnose(orders, zipf), orders, zipf };
}
