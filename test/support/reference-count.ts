/**
 * An independent reference for n-gram counts, for tests: the counts are made by a shell pipeline of
 * standard tools, not by any Quern code.
 *
 *   LC_ALL=C awk -v order=N -v lowercase=0|1 '<emit n-grams>' FILE... | LC_ALL=C sort | LC_ALL=C uniq -c
 *
 * (mawk at /usr/bin/awk, GNU coreutils sort and uniq.) awk reads the files itself rather than
 * through `cat`, so a file whose last line lacks a newline cannot run into the first line of the
 * next file: every file ends a line, as in Quern.
 *
 * Conventions followed (shared/DESIGN.md, "Language-model conventions"):
 *   - a line is a sentence; a line that is empty or holds only white space is not a sentence;
 *   - tokens are separated by white space;
 *   - each sentence is wrapped as `<s> w1 … wm </s>` with one `<s>` and no further padding;
 *   - the n-grams of orders 1..N are those of the wrapped sentence that END at a predicted position
 *     (positions 1..m+1, counting `<s>` as position 0): `<s>` is never a unigram and appears only
 *     as the first word of an n-gram; `</s>` is predicted.
 *
 * Scope: the reference is for ASCII-whitespace data. awk's default field splitting treats runs of
 * spaces and tabs as separators; other white space (vertical tab, form feed, carriage return, and
 * any non-ASCII space such as U+00A0 or U+3000) is NOT treated as a separator here, so do not feed
 * such data to it. Lower-casing (`lowercase: true`) is awk's tolower under LC_ALL=C, which changes
 * ASCII A–Z only; non-ASCII letters are left as they are. Bytes are compared as bytes (LC_ALL=C).
 */
import { spawnSync } from 'node:child_process';

export interface ReferenceOptions {
  /** Lower-case ASCII letters before splitting. */
  lowercase: boolean;
}

/** Highest order the reference accepts (Quern's ORDER_MAX is lower; this only bounds the awk loop). */
const REFERENCE_ORDER_MAX = 16;

/** Largest pipeline output accepted (bytes of `uniq -c` text); the reference is meant for small data. */
const REFERENCE_OUTPUT_BYTES_MAX = 1 << 30;

/**
 * mawk program: for each non-blank line, wrap it and print every n-gram of order 1..order that
 * ends at a predicted position, one per line, words joined by one space.
 */
export const AWK_PROGRAM = `
NF > 0 {
  w[0] = "<s>"
  for (i = 1; i <= NF; i++) w[i] = (lowercase == 1 ? tolower($i) : $i)
  w[NF + 1] = "</s>"
  for (i = 1; i <= NF + 1; i++) {
    g = w[i]
    print g
    for (n = 2; n <= order && i - n + 1 >= 0; n++) {
      g = w[i - n + 1] " " g
      print g
    }
  }
}`;

/** `set -o pipefail` so a failing awk, sort or uniq fails the whole call. "$@" are the files. */
const PIPELINE =
  'set -o pipefail; LC_ALL=C awk -v order="$REF_ORDER" -v lowercase="$REF_LOWERCASE" "$REF_AWK" "$@" | LC_ALL=C sort | LC_ALL=C uniq -c';

/**
 * Counts the n-grams of orders 1..`order` in plain-text `files` (already decompressed) with the
 * awk | sort | uniq -c pipeline. Keys are the words of the n-gram joined by one space, e.g.
 * `"<s> the ferry"`; values are counts ≥ 1. An empty file list gives an empty map.
 *
 * @throws RangeError for an order outside [1, 16]; Error when the pipeline fails (e.g. a missing file).
 */
export function referenceCounts(files: readonly string[], order: number, opts: ReferenceOptions): Map<string, number> {
  if (!Number.isInteger(order) || order < 1 || order > REFERENCE_ORDER_MAX) {
    throw new RangeError(`order must be an integer in [1, ${REFERENCE_ORDER_MAX}], got ${order}`);
  }
  const counts = new Map<string, number>();
  if (files.length === 0) return counts; // awk would otherwise read standard input.

  const result = spawnSync('bash', ['-c', PIPELINE, 'reference-count', ...files], {
    env: {
      PATH: process.env.PATH ?? '/usr/bin:/bin',
      REF_ORDER: String(order),
      REF_LOWERCASE: opts.lowercase ? '1' : '0',
      REF_AWK: AWK_PROGRAM,
    },
    stdio: ['ignore', 'pipe', 'pipe'],
    maxBuffer: REFERENCE_OUTPUT_BYTES_MAX,
  });
  if (result.error) throw new Error(`reference pipeline could not run: ${result.error.message}`, { cause: result.error });
  if (result.status !== 0) {
    throw new Error(`reference pipeline failed (exit ${result.status ?? result.signal}): ${result.stderr.toString('utf8').trim()}`);
  }

  const text = result.stdout.toString('utf8');
  // `uniq -c` prints the count right-aligned, one space, then the line.
  const linePattern = /^ *([1-9][0-9]*) (.+)$/;
  for (const line of text.split('\n')) {
    if (line === '') continue;
    const match = linePattern.exec(line);
    if (match === null) throw new Error(`unexpected uniq -c line: ${JSON.stringify(line)}`);
    const ngram = match[2];
    if (counts.has(ngram)) throw new Error(`n-gram listed twice by uniq -c: ${JSON.stringify(ngram)}`);
    counts.set(ngram, Number(match[1]));
  }
  return counts;
}

/** Order of an n-gram key (number of space-separated words). */
export function orderOf(ngram: string): number {
  let order = 1;
  for (let index = 0; index < ngram.length; index++) if (ngram.charCodeAt(index) === 0x20) order++;
  return order;
}

/**
 * The same counts as `referenceCounts`, split by order: `result.get(n)` holds the n-grams of order
 * n (an empty map for an order with none), for n = 1..order.
 */
export function referenceCountsByOrder(
  files: readonly string[],
  order: number,
  opts: ReferenceOptions,
): Map<number, Map<string, number>> {
  const all = referenceCounts(files, order, opts);
  const byOrder = new Map<number, Map<string, number>>();
  for (let n = 1; n <= order; n++) byOrder.set(n, new Map());
  for (const [ngram, count] of all) byOrder.get(orderOf(ngram))!.set(ngram, count);
  return byOrder;
}
