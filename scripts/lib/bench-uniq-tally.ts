/**
 * Tallies the output of `uniq -c` over n-gram lines (words joined by one space) per order: how many
 * distinct n-grams and how many occurrences of each order, reading the file as a byte stream so
 * that a multi-gigabyte listing never sits in memory and no string is made per line.
 *
 * `uniq -c` (GNU coreutils) prints each line as the count right-aligned in 7 columns, one space,
 * then the line: `/^ *[1-9][0-9]* (.+)$/`. The order of an n-gram is one more than the number of
 * spaces in it, which holds for tokens split on white space (a token never contains a space).
 */
import { createReadStream } from 'node:fs';

export interface OrderTally {
  /** Distinct n-grams per order (index 0 = order 1). */
  distinct: number[];
  /** N-gram occurrences per order (sum of the counts). */
  occurrences: number[];
  /** Lines read. */
  lines: number;
}

const SPACE = 0x20;
const NEWLINE = 0x0a;
const DIGIT_0 = 0x30;
const DIGIT_9 = 0x39;

// Parser states within a line.
const LEADING = 0; // spaces before the count
const COUNT = 1; // digits of the count
const NGRAM = 2; // the n-gram itself

/**
 * Reads the `uniq -c` output at `path` and tallies it per order 1..`orderMax`.
 * @throws Error naming the line on any line that is not `count n-gram` with a count ≥ 1, on an
 *   n-gram of order above `orderMax`, on an empty n-gram, and on a last line without a newline.
 */
export async function tallyUniqCounts(path: string, orderMax: number): Promise<OrderTally> {
  if (!Number.isInteger(orderMax) || orderMax < 1) throw new RangeError(`tallyUniqCounts: orderMax must be an integer ≥ 1, got ${orderMax}`);
  const distinct = new Array<number>(orderMax).fill(0);
  const occurrences = new Array<number>(orderMax).fill(0);
  let lines = 0;

  let state = LEADING;
  let count = 0;
  let digits = 0;
  let spaces = 0; // spaces seen inside the n-gram
  let ngramBytes = 0;
  let afterSpace = false; // the previous byte of the n-gram was a space (or the n-gram has not begun)

  const bad = (why: string): never => {
    throw new Error(`${path}: line ${lines + 1} of uniq -c output: ${why}`);
  };

  for await (const chunk of createReadStream(path, { highWaterMark: 1 << 20 }) as AsyncIterable<Buffer>) {
    for (let index = 0; index < chunk.length; index++) {
      const byte = chunk[index];
      if (byte === NEWLINE) {
        if (state !== NGRAM || ngramBytes === 0) bad('no n-gram after the count');
        if (afterSpace) bad('n-gram ends with a space');
        if (count < 1) bad(`count ${count} < 1`);
        const order = spaces + 1;
        if (order > orderMax) bad(`n-gram of order ${order} > ${orderMax}`);
        distinct[order - 1]++;
        occurrences[order - 1] += count;
        lines++;
        state = LEADING;
        count = 0;
        digits = 0;
        spaces = 0;
        ngramBytes = 0;
        continue;
      }
      if (state === NGRAM) {
        ngramBytes++;
        if (byte === SPACE) {
          // A leading, trailing or doubled space would make the order come out wrong.
          if (afterSpace) bad('n-gram starts with a space or holds two in a row');
          spaces++;
          afterSpace = true;
        } else {
          afterSpace = false;
        }
      } else if (byte >= DIGIT_0 && byte <= DIGIT_9) {
        state = COUNT;
        count = count * 10 + (byte - DIGIT_0);
        if (++digits > 15) bad('count has more than 15 digits');
      } else if (byte === SPACE) {
        if (state === COUNT) {
          state = NGRAM; // the one space between count and n-gram
          afterSpace = true;
        }
      } else {
        bad(`unexpected byte 0x${byte.toString(16)} before the n-gram`);
      }
    }
  }
  if (state !== LEADING) bad('last line has no newline');
  return { distinct, occurrences, lines };
}
