/**
 * A model in back-off form as a stream of rows, order by order: what the pack stage reads.
 *
 * The in-memory `LanguageModel` is one source (`modelSource`); the streaming estimator, which writes
 * its results partition by partition into the job, is another. A reader never needs all rows of an
 * order at once: it asks for the rows of an order (as many passes as it likes) and gets them in
 * ascending id order, in batches.
 *
 * Rows follow model.ts: order 1 holds every id 0..V (row = id; `<s>` has log10Prob −∞ and carries
 * the back-off weight of the context `<s>`); orders ≥ 2 hold the n-grams kept from training,
 * sorted by their ids; log10BackOff is 0 for a row that is no context of the next order.
 */
import { assert } from '../errors.ts';
import { modelRowCount, type LanguageModel } from './model.ts';

/** Everything of a model but its rows. */
export type ModelHeader = Omit<LanguageModel, 'orders'>;

/** Consecutive rows of one order. */
export interface ModelRowBatch {
  /** Rows in the batch (≥ 1). */
  rows: number;
  /** rows × order ids, row-major; rows ascend within and across batches. */
  ids: Uint32Array;
  /** log10 p(w | h) of each row. */
  log10Prob: Float64Array;
  /** log10 back-off weight of each row as a context of the next order (0 when it is none). */
  log10BackOff: Float64Array;
}

/** How `ModelSource.rows` is read. */
export interface RowOptions {
  idsOnly?: boolean;
}

/** A model read order by order. */
export interface ModelSource {
  header: ModelHeader;
  /** Rows per order 1..N (index order − 1). */
  rowCounts: number[];
  /** The rows of `order` (1..N) in ascending id order; every call starts a new pass. With
   *  `idsOnly`, a source may leave the batches' back-off weights empty (length 0) and skip the work
   *  of joining them: for readers of the ids alone (the pack's children counts). */
  rows(order: number, options?: RowOptions): AsyncIterable<ModelRowBatch>;
}

/** Rows per batch of `modelSource`. */
const MODEL_SOURCE_BATCH_ROWS = 65_536;

/** The in-memory model as a source (batches are views into its arrays, not copies). */
export function modelSource(model: LanguageModel): ModelSource {
  const { orders, ...header } = model;
  return {
    header,
    rowCounts: orders.map(modelRowCount),
    async *rows(order: number): AsyncIterable<ModelRowBatch> {
      assert(Number.isInteger(order) && order >= 1 && order <= model.order, `order in [1, ${model.order}]`);
      const table = orders[order - 1];
      const total = modelRowCount(table);
      for (let start = 0; start < total; start += MODEL_SOURCE_BATCH_ROWS) {
        const end = Math.min(total, start + MODEL_SOURCE_BATCH_ROWS);
        yield {
          rows: end - start,
          ids: table.ids.subarray(start * order, end * order),
          log10Prob: table.log10Prob.subarray(start, end),
          log10BackOff: table.log10BackOff.subarray(start, end),
        };
      }
    },
  };
}
