/**
 * Sorted n-gram rows: the shape both the count tables and the model's tables share.
 *
 * A table of order n keeps its n-grams flat in one Uint32Array, n ids per row, rows sorted
 * ascending lexicographically by their ids (the order the count store lists them in). All n-grams
 * that share a context (their first n−1 ids) are therefore contiguous, and one binary search finds
 * an n-gram, or tells where it would be.
 */
import { assert } from '../errors.ts';

/**
 * Compares row `row` of `ids` (rows of `order` ids) with `key[keyStart .. keyStart+length)` on
 * their first `length` ids: negative, zero or positive as the row sorts before, equal to or after.
 */
export function compareRow(ids: Uint32Array, order: number, row: number, key: ArrayLike<number>, keyStart: number, length: number): number {
  const base = row * order;
  for (let i = 0; i < length; i++) {
    const difference = ids[base + i] - key[keyStart + i];
    if (difference !== 0) return difference;
  }
  return 0;
}

/**
 * Binary search for the n-gram `key[keyStart .. keyStart+order)` among `rows` rows: its row when
 * present, otherwise −(insertion point) − 1 (the row it would take, negated, minus one).
 */
export function searchRows(ids: Uint32Array, order: number, rows: number, key: ArrayLike<number>, keyStart: number): number {
  let low = 0;
  let high = rows - 1;
  while (low <= high) {
    const middle = (low + high) >>> 1;
    const comparison = compareRow(ids, order, middle, key, keyStart, order);
    if (comparison < 0) low = middle + 1;
    else if (comparison > 0) high = middle - 1;
    else return middle;
  }
  return -low - 1;
}

/**
 * The rows whose first `length` ids equal `key[keyStart .. keyStart+length)`: [start, end), empty
 * (start = end) when there are none. Two binary searches.
 */
export function prefixRange(ids: Uint32Array, order: number, rows: number, key: ArrayLike<number>, keyStart: number, length: number): [number, number] {
  let low = 0;
  let high = rows;
  while (low < high) {
    const middle = (low + high) >>> 1;
    if (compareRow(ids, order, middle, key, keyStart, length) < 0) low = middle + 1;
    else high = middle;
  }
  const start = low;
  high = rows;
  while (low < high) {
    const middle = (low + high) >>> 1;
    if (compareRow(ids, order, middle, key, keyStart, length) <= 0) low = middle + 1;
    else high = middle;
  }
  return [start, low];
}

/** True when rows `a` and `b` of an order-`order` table share their first `length` ids. */
export function rowsSharePrefix(ids: Uint32Array, order: number, a: number, b: number, length: number): boolean {
  const baseA = a * order;
  const baseB = b * order;
  for (let i = 0; i < length; i++) if (ids[baseA + i] !== ids[baseB + i]) return false;
  return true;
}

/**
 * Start rows of the contexts of a table of order ≥ 2 (runs of rows sharing their first order−1
 * ids), followed by the row count: context j spans rows [starts[j], starts[j+1]). With `scratch`
 * (at least rows + 1 long), one pass writes them into it and the answer is a view of it; without,
 * a pass counts them first so that the array is no longer than needed (whole tables in memory).
 */
export function contextStarts(ids: Uint32Array, order: number, rows: number, scratch?: Uint32Array): Uint32Array {
  if (scratch !== undefined) {
    assert(scratch.length >= rows + 1, 'a context-start scratch holds a start per row and the end');
    let next = 0;
    for (let row = 0; row < rows; row++) if (row === 0 || !rowsSharePrefix(ids, order, row - 1, row, order - 1)) scratch[next++] = row;
    scratch[next] = rows;
    return scratch.subarray(0, next + 1);
  }
  let contexts = 0;
  for (let row = 0; row < rows; row++) if (row === 0 || !rowsSharePrefix(ids, order, row - 1, row, order - 1)) contexts++;
  const starts = new Uint32Array(contexts + 1);
  let next = 0;
  for (let row = 0; row < rows; row++) if (row === 0 || !rowsSharePrefix(ids, order, row - 1, row, order - 1)) starts[next++] = row;
  starts[contexts] = rows;
  return starts;
}

/** Index of the context (of `starts`, as contextStarts gives them) whose rows include `row`. */
export function contextIndexOf(starts: Uint32Array, row: number): number {
  let low = 0;
  let high = starts.length - 2;
  while (low < high) {
    const middle = (low + high + 1) >>> 1;
    if (starts[middle] <= row) low = middle;
    else high = middle - 1;
  }
  return low;
}
