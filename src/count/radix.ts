/**
 * The move step of an LSD radix pass over rows of `stride` 32-bit words, shared by the spill sort
 * (spill-sort.ts) and the local continuation sort (merge/local-continuation.ts).
 *
 * Rows are copied word by word; for the usual strides the copy is written out, since V8 does not
 * unroll a loop over a stride known only at run time. The result is the same either way; what it
 * gains is measured only together with the other count-speed changes (bench:count --against, see
 * BENCHMARKS.md).
 */

/** One radix pass over rows or keys: the digit is (row[word] >>> shift) & (2^bits − 1). */
export interface RadixPass {
  word: number;
  shift: number;
  bits: number;
}

/**
 * The LSD passes that sort rows by `idCount` ids from word `firstWord` on, each below 2^idBits: the
 * last id first, as few passes per id as idBits needs, digits of at most `digitBitsMax` bits,
 * balanced (the spill sort's rows with counts, spill-sort.ts; the suffixes of the local continuation
 * counts, local-continuation.ts).
 */
export function idRadixPasses(idBits: number, firstWord: number, idCount: number, digitBitsMax: number): { passes: RadixPass[]; passesPerId: number; digitBits: number } {
  const passesPerId = Math.ceil(idBits / digitBitsMax);
  const digitBits = Math.ceil(idBits / passesPerId);
  const passes: RadixPass[] = [];
  for (let k = firstWord + idCount - 1; k >= firstWord; k--) for (let q = 0; q < passesPerId; q++) passes.push({ word: k, shift: q * digitBits, bits: digitBits });
  return { passes, passesPerId, digitBits };
}

/**
 * Moves rows begin..end of `source` into `target`, row r to row `offsets[digit(r)]++`, where
 * digit(r) = (source[r·stride + word] >>> shift) & mask: one stable counting pass. `offsets` holds
 * each digit's first target row (the prefix sums of the digit histogram) and is advanced in place.
 */
export function scatterRows(
  source: Uint32Array, target: Uint32Array, begin: number, end: number, stride: number,
  word: number, shift: number, mask: number, offsets: Uint32Array | Int32Array,
): void {
  const first = begin * stride;
  const last = end * stride;
  switch (stride) {
    case 1:
      for (let from = first; from < last; from++) target[offsets[(source[from + word] >>> shift) & mask]++] = source[from];
      return;
    case 2:
      for (let from = first; from < last; from += 2) {
        const to = offsets[(source[from + word] >>> shift) & mask]++ * 2;
        target[to] = source[from];
        target[to + 1] = source[from + 1];
      }
      return;
    case 3:
      for (let from = first; from < last; from += 3) {
        const to = offsets[(source[from + word] >>> shift) & mask]++ * 3;
        target[to] = source[from];
        target[to + 1] = source[from + 1];
        target[to + 2] = source[from + 2];
      }
      return;
    case 4:
      for (let from = first; from < last; from += 4) {
        const to = offsets[(source[from + word] >>> shift) & mask]++ * 4;
        target[to] = source[from];
        target[to + 1] = source[from + 1];
        target[to + 2] = source[from + 2];
        target[to + 3] = source[from + 3];
      }
      return;
    case 5:
      for (let from = first; from < last; from += 5) {
        const to = offsets[(source[from + word] >>> shift) & mask]++ * 5;
        target[to] = source[from];
        target[to + 1] = source[from + 1];
        target[to + 2] = source[from + 2];
        target[to + 3] = source[from + 3];
        target[to + 4] = source[from + 4];
      }
      return;
    case 6:
      for (let from = first; from < last; from += 6) {
        const to = offsets[(source[from + word] >>> shift) & mask]++ * 6;
        target[to] = source[from];
        target[to + 1] = source[from + 1];
        target[to + 2] = source[from + 2];
        target[to + 3] = source[from + 3];
        target[to + 4] = source[from + 4];
        target[to + 5] = source[from + 5];
      }
      return;
    default:
      for (let from = first; from < last; from += stride) {
        const to = offsets[(source[from + word] >>> shift) & mask]++ * stride;
        for (let w = 0; w < stride; w++) target[to + w] = source[from + w];
      }
  }
}

/**
 * Sorts rows 0..count−1 of `rows` (rows of `stride` 32-bit words) by the words at `columns`, the
 * first most significant: an LSD radix sort with digits of `digitBits` bits, stable, as many passes
 * per column as its largest value needs. `spare` is a second array of the same size; returns the
 * one that holds the sorted rows (`rows` or `spare`).
 */
export function sortRowsByColumns(
  rows: Uint32Array, spare: Uint32Array, count: number, stride: number, columns: readonly number[], digitBits: number,
): Uint32Array {
  const digits = 1 << digitBits;
  const offsets = new Uint32Array(digits);
  let source = rows;
  let target = spare;
  for (let c = columns.length - 1; c >= 0; c--) {
    const column = columns[c];
    let max = 0;
    for (let row = 0; row < count; row++) if (source[row * stride + column] > max) max = source[row * stride + column];
    for (let shift = 0; shift < 32 && (shift === 0 || max >>> shift !== 0); shift += digitBits) {
      offsets.fill(0);
      for (let row = 0; row < count; row++) offsets[(source[row * stride + column] >>> shift) & (digits - 1)]++;
      let sum = 0;
      for (let d = 0; d < digits; d++) {
        const digitCount = offsets[d];
        offsets[d] = sum;
        sum += digitCount;
      }
      scatterRows(source, target, 0, count, stride, column, shift, digits - 1, offsets);
      [source, target] = [target, source];
    }
  }
  return source;
}
