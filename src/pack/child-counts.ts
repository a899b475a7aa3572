/**
 * Children of each row, from a model read as a stream (src/estimate/model-source.ts): the rows of
 * order n and of order n + 1 are read side by side, in ascending order, and each row of order n is
 * given the number of rows of order n + 1 whose first n ids are its ids (the n-grams it is the
 * context of). Both streams are sorted the same way, so one merge-like pass suffices; neither order
 * is held in memory beyond one batch of each.
 */
import { assert } from '../errors.ts';
import type { ModelRowBatch, ModelSource } from '../estimate/model-source.ts';
import { compareRows } from '../count/block-codec.ts';

/** A position in the stream of rows of one order. */
class RowCursor {
  private readonly iterator: AsyncIterator<ModelRowBatch>;
  batch: ModelRowBatch | null = null;
  index = 0;
  done = false;

  constructor(source: ModelSource, readonly order: number) {
    this.iterator = source.rows(order, { idsOnly: true })[Symbol.asyncIterator]();
  }

  /** Loads the next batch when the current one is used up; false at the end of the order. */
  async fill(): Promise<boolean> {
    while (!this.done && (this.batch === null || this.index >= this.batch.rows)) {
      const next = await this.iterator.next();
      if (next.done === true) {
        this.done = true;
        this.batch = null;
      } else {
        assert(next.value.rows >= 1 && next.value.ids.length === next.value.rows * this.order, 'a batch holds rows × order ids');
        this.batch = next.value;
        this.index = 0;
      }
    }
    return !this.done;
  }

  /** Stops the stream early (its source closes its files); nothing after its end. */
  async close(): Promise<void> {
    if (!this.done) await this.iterator.return?.();
    this.done = true;
  }
}

/**
 * The rows of order n in order, batch by batch, each batch with `counts`: how many rows of order
 * n + 1 each of its rows is the context of (all 0 at the highest order). Asserts that every
 * row of order n + 1 has its context among the rows of order n (the estimators keep the prefixes of
 * their n-grams) and that the counts sum to the rows of n + 1.
 */
export async function* rowsWithChildren(source: ModelSource, n: number): AsyncGenerator<{ batch: ModelRowBatch; counts: Uint32Array }> {
  const upper = n === source.rowCounts.length ? null : new RowCursor(source, n + 1);
  let upperRows = 0;
  let finished = false;
  try {
    for await (const batch of source.rows(n)) {
      const counts = new Uint32Array(batch.rows);
      if (upper !== null) {
        for (let row = 0; row < batch.rows; row++) {
          let count = 0;
          for (;;) {
            if ((upper.batch === null || upper.index >= upper.batch.rows) && !(await upper.fill())) break;
            const current = upper.batch as ModelRowBatch;
            const order = compareRows(current.ids, upper.index * (n + 1), batch.ids, row * n, n);
            if (order > 0) break;
            if (order < 0) assert(false, `order ${n + 1}: an n-gram's context is a row of order ${n}, and rows ascend`);
            count++;
            upper.index++;
          }
          counts[row] = count;
          upperRows += count;
        }
      }
      yield { batch, counts };
    }
    finished = true;
  } finally {
    // Stopped early (a failure here or downstream): the upper stream's files are closed too.
    if (!finished) await upper?.close();
  }
  if (upper === null) return;
  const left = (upper.batch === null || upper.index >= upper.batch.rows) ? await upper.fill() : true;
  assert(!left, `order ${n + 1}: every n-gram's context is a row of order ${n}`);
  assert(upperRows === source.rowCounts[n], `order ${n + 1}: the rows read are the rows announced`);
}
