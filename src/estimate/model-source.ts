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
import { assert, QuernError } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { compareRows } from '../count/block-codec.ts';
import { checkModel, modelRowCount, type LanguageModel, type ModelOrder } from './model.ts';

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

/**
 * Reads a whole ModelSource into an in-memory LanguageModel (for tests, and for packing until the
 * model file is written from a source directly): every order's rows, and each row's context row,
 * found by one walk since contexts ascend with their rows.
 */
export async function materialiseModel(source: ModelSource): Promise<LanguageModel> {
  const orders: ModelOrder[] = [];
  for (let order = 1; order <= source.rowCounts.length; order++) {
    const total = source.rowCounts[order - 1];
    const ids = new Uint32Array(total * order);
    const log10Prob = new Float64Array(total);
    const log10BackOff = new Float64Array(total);
    let rows = 0;
    for await (const batch of source.rows(order)) {
      if (rows + batch.rows > total) throw new QuernError('corrupt', `the model source yields more rows of order ${order} than its ${total}`);
      ids.set(batch.ids.subarray(0, batch.rows * order), rows * order);
      log10Prob.set(batch.log10Prob.subarray(0, batch.rows), rows);
      log10BackOff.set(batch.log10BackOff.subarray(0, batch.rows), rows);
      rows += batch.rows;
    }
    if (rows !== total) throw new QuernError('corrupt', `the model source yields ${rows} rows of order ${order}, not ${total}`);
    const contextRow = new Uint32Array(order === 1 ? 0 : total);
    if (order > 1) {
      const shorter = orders[order - 2];
      const shorterRows = shorter.log10Prob.length;
      let context = 0;
      for (let row = 0; row < total; row++) {
        while (context < shorterRows && compareRows(shorter.ids, context * (order - 1), ids, row * order, order - 1) < 0) context++;
        if (!(context < shorterRows && compareRows(shorter.ids, context * (order - 1), ids, row * order, order - 1) === 0)) {
          throw new QuernError('corrupt', `the context of a row of order ${order} is not a row of order ${order - 1}`);
        }
        contextRow[row] = context;
      }
    } else {
      assert(ids[BOS_ID] === BOS_ID, 'order 1 starts with <s>');
    }
    orders.push({ order, ids, log10Prob, log10BackOff, contextRow });
  }
  const model: LanguageModel = { ...source.header, orders };
  checkModel(model);
  return model;
}
