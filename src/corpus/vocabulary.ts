/**
 * The vocabulary: word types with their counts and integer ids.
 *
 * Id 0 is `<s>`, a context only (never predicted, not part of the vocabulary proper). Ids 1.. are the
 * vocabulary — the kept word types plus `</s>` and `<unk>` — ranked by count, most frequent first,
 * ties broken by the words' UTF-8 bytes (ascending). Frequent words therefore get small ids, which
 * keeps the varint-coded run files and store keys short.
 */
import { assert, QuernError } from '../errors.ts';
import { VOCAB_TYPES_MAX } from '../limits.ts';

export const BOS = '<s>';
export const EOS = '</s>';
export const UNK = '<unk>';
export const BOS_ID = 0;

/** A cap on the vocabulary; words outside it are counted as `<unk>`. */
export interface VocabCap {
  /** Keep only the `top` most frequent word types (ties by bytes). */
  top?: number;
  /** Keep only word types seen at least `minCount` times. */
  minCount?: number;
}

export interface Vocabulary {
  /** words[id]; words[0] is `<s>`. */
  words: string[];
  /** counts[id] as unigram counts; counts[0] (`<s>`) is the number of sentences. */
  counts: number[];
  eosId: number;
  unkId: number;
  /** Word types seen in the training text (before the cap, without the markers). */
  typesSeen: number;
  /** Word types mapped to `<unk>` by the cap. */
  typesCapped: number;
}

/** Compares two strings in code-point order, which is the order of their UTF-8 bytes. */
export function compareCodePoints(a: string, b: string): number {
  const length = Math.min(a.length, b.length);
  for (let i = 0; i < length; i++) {
    let ca = a.charCodeAt(i);
    let cb = b.charCodeAt(i);
    if (ca === cb) continue;
    // Surrogates (U+D800..DFFF) encode code points above U+FFFF: move them above U+E000..FFFF.
    if (ca >= 0xd800) ca += ca <= 0xdfff ? 0x2000 : -0x800;
    if (cb >= 0xd800) cb += cb <= 0xdfff ? 0x2000 : -0x800;
    return ca - cb;
  }
  return a.length - b.length;
}

/** Word types and their counts as parallel lists (no markers, no word twice). */
export interface WordCounts {
  words: readonly string[];
  counts: ArrayLike<number>;
}

/** A vocabulary and where each word of the list it was built from went. */
export interface RankedVocabulary {
  vocab: Vocabulary;
  /** idOf[i]: the id of the list's word i; `unkId` for a word the cap left out. */
  idOf: Uint32Array;
}

/** Bits of a sort key (a float64 integer) that stay exact. */
const SORT_KEY_BITS = 53;

/**
 * The UTF-8 bytes of `word` after its first `skip` bytes, as many as `bytes`, as one integer
 * (big-endian, the missing bytes of a shorter word as 0): numeric order of two such prefixes is
 * their byte order, and prefixes that tie are told apart by the bytes after them.
 */
function utf8Prefix(word: string, skip: number, bytes: number): number {
  let key = 0;
  let taken = 0;
  let at = 0;
  for (let i = 0; i < word.length && taken < bytes; i++) {
    let c = word.charCodeAt(i);
    if (c < 0x80) {
      if (at++ >= skip) {
        key = key * 256 + c;
        taken++;
      }
      continue;
    }
    if (c >= 0xd800 && c <= 0xdbff && i + 1 < word.length) {
      const low = word.charCodeAt(i + 1);
      if (low >= 0xdc00 && low <= 0xdfff) {
        c = 0x10000 + ((c - 0xd800) << 10) + (low - 0xdc00);
        i++;
      }
    }
    // The character's UTF-8 bytes: the lead byte, then 6 bits a byte.
    const length = c < 0x800 ? 2 : c < 0x10000 ? 3 : 4;
    for (let b = length - 1; b >= 0 && taken < bytes; b--) {
      if (at++ < skip) continue;
      const byte = b === length - 1 ? ((0xf00 >> length) & 0xff) | (c >> (6 * b)) : 0x80 | ((c >> (6 * b)) & 0x3f);
      key = key * 256 + byte;
      taken++;
    }
  }
  for (; taken < bytes; taken++) key *= 256;
  return key;
}

/** Runs this short, or ties this deep into their words, are sorted by comparing the words whole. */
const SORT_RUN_COMPARED_MAX = 8;
const SORT_PREFIX_DEPTH_MAX = 64;

/**
 * Sorts `group` (indexes into `words`) by the words' UTF-8 bytes after their first `skip` (which
 * the group's words share), ascending. Each index is sorted as one number, the word's next bytes
 * above the index's place in the group, by the typed array's own numeric sort; the indexes whose
 * bytes tie are sorted again by the bytes after those. On the 200,000 words of the benchmark corpus
 * most count groups are large (a Zipf-like vocabulary's rare words share a few small counts), where
 * comparing the words as strings was most of the ranking's time.
 */
function sortByBytes(words: readonly string[], group: Uint32Array, skip: number): void {
  const n = group.length;
  if (n < 2) return;
  if (n <= SORT_RUN_COMPARED_MAX || skip >= SORT_PREFIX_DEPTH_MAX) {
    // (A word and the same word with NUL bytes after it tie at every depth.)
    const run = Array.from(group);
    run.sort((a, b) => compareCodePoints(words[a], words[b]));
    group.set(run);
    return;
  }
  const indexBits = 32 - Math.clz32(n - 1);
  const prefixBytes = Math.floor((SORT_KEY_BITS - indexBits) / 8);
  const scale = 2 ** indexBits;
  const keys = new Float64Array(n);
  for (let i = 0; i < n; i++) keys[i] = utf8Prefix(words[group[i]], skip, prefixBytes) * scale + i;
  keys.sort();
  const sorted = new Uint32Array(n);
  for (let i = 0; i < n; i++) sorted[i] = group[keys[i] % scale];
  group.set(sorted);
  for (let start = 0; start < n;) {
    const prefix = Math.floor(keys[start] / scale);
    let end = start + 1;
    while (end < n && Math.floor(keys[end] / scale) === prefix) end++;
    if (end - start > 1) sortByBytes(words, group.subarray(start, end), skip + prefixBytes);
    start = end;
  }
}

/**
 * The list's indexes in vocabulary order: count descending, ties by code points (UTF-8 bytes)
 * ascending. The words are grouped by count first (a Zipf-like vocabulary has few distinct counts)
 * and only each group is sorted.
 */
function rankOrder(list: WordCounts): Uint32Array {
  const n = list.words.length;
  const sizes = new Map<number, number>();
  for (let i = 0; i < n; i++) sizes.set(list.counts[i], (sizes.get(list.counts[i]) ?? 0) + 1);
  const distinct = [...sizes.keys()].sort((a, b) => b - a);
  const starts = new Map<number, number>();
  let at = 0;
  for (const count of distinct) {
    starts.set(count, at);
    at += sizes.get(count)!;
  }
  const order = new Uint32Array(n);
  const next = new Map(starts);
  for (let i = 0; i < n; i++) {
    const count = list.counts[i];
    const place = next.get(count)!;
    order[place] = i;
    next.set(count, place + 1);
  }
  for (const count of distinct) {
    const start = starts.get(count)!;
    sortByBytes(list.words, order.subarray(start, start + sizes.get(count)!), 0);
  }
  return order;
}

/** Where a marker with `count` goes among the first `length` ranked words (rankOrder). */
function markerPlace(list: WordCounts, order: Uint32Array, length: number, marker: string, count: number): number {
  let low = 0;
  let high = length;
  while (low < high) {
    const middle = (low + high) >>> 1;
    const other = order[middle];
    const otherCount = list.counts[other];
    if (otherCount > count || (otherCount === count && compareCodePoints(list.words[other], marker) < 0)) low = middle + 1;
    else high = middle;
  }
  return low;
}

/**
 * Builds the vocabulary from word counts (which must not contain the markers), the number of
 * sentences, literal `<unk>` occurrences already counted, and an optional cap.
 */
export function buildVocabulary(wordCounts: Map<string, number>, sentences: number, unkSeen: number, cap: VocabCap): Vocabulary {
  return buildRankedVocabulary({ words: [...wordCounts.keys()], counts: [...wordCounts.values()] }, sentences, unkSeen, cap).vocab;
}

/** `buildVocabulary` from parallel lists, with each listed word's id. */
export function buildRankedVocabulary(list: WordCounts, sentences: number, unkSeen: number, cap: VocabCap): RankedVocabulary {
  const seen = list.words.length;
  assert(list.counts.length === seen, 'a count per word');
  const order = rankOrder(list);
  let kept = seen;
  if (cap.minCount !== undefined) {
    kept = 0;
    while (kept < seen && list.counts[order[kept]] >= cap.minCount) kept++;
  }
  if (cap.top !== undefined) kept = Math.min(kept, cap.top);
  let unkCount = unkSeen;
  for (let i = kept; i < seen; i++) unkCount += list.counts[order[i]];
  if (kept + 3 > VOCAB_TYPES_MAX) {
    throw new QuernError('limit', `vocabulary of ${kept + 2} types exceeds ${VOCAB_TYPES_MAX}; cap it with --vocab-top or --vocab-min-count`);
  }
  // The markers' places among the kept words (not part of the cap), the one of `</s>` first.
  const markers: Array<[string, number, number]> = [[EOS, sentences, markerPlace(list, order, kept, EOS, sentences)], [UNK, unkCount, markerPlace(list, order, kept, UNK, unkCount)]];
  markers.sort((x, y) => x[2] - y[2] || y[1] - x[1] || compareCodePoints(x[0], y[0]));
  const words: string[] = new Array(kept + 3);
  const counts: number[] = new Array(kept + 3);
  const idOf = new Uint32Array(seen);
  words[0] = BOS;
  counts[0] = sentences;
  let id = 1;
  let eosId = -1;
  let unkId = -1;
  let marker = 0;
  for (let rank = 0; rank <= kept; rank++) {
    while (marker < 2 && markers[marker][2] === rank) {
      const [word, count] = markers[marker++];
      if (word === EOS) eosId = id;
      else unkId = id;
      words[id] = word;
      counts[id++] = count;
    }
    if (rank === kept) break;
    const i = order[rank];
    idOf[i] = id;
    words[id] = list.words[i];
    counts[id++] = list.counts[i];
  }
  assert(id === kept + 3 && eosId > 0 && unkId > 0, 'every kept word and both markers placed');
  for (let rank = kept; rank < seen; rank++) idOf[order[rank]] = unkId;
  return { vocab: { words, counts, eosId, unkId, typesSeen: seen, typesCapped: seen - kept }, idOf };
}

const VOCAB_FILE_HEADER = '# quern vocabulary v1';

/** Serialises the vocabulary as text: a header line, then `id<TAB>word<TAB>count` per line. */
export function formatVocabulary(vocab: Vocabulary): string {
  return formatVocabularyBytes(vocab).toString('utf8');
}

/** `formatVocabulary`'s text as UTF-8 bytes, written straight into a buffer: its digits by hand and
 *  ASCII words byte by byte (0.3–0.4× the time of a string per line joined, on the benchmark
 *  corpus's 200,000 words; this runs between the two passes, the workers idle). */
export function formatVocabularyBytes(vocab: Vocabulary): Buffer {
  const header = `${VOCAB_FILE_HEADER} types=${vocab.words.length} seen=${vocab.typesSeen} capped=${vocab.typesCapped}\n`;
  let buffer = Buffer.allocUnsafe(Math.max(1 << 16, 24 * vocab.words.length));
  let at = buffer.write(header, 0, 'utf8');
  for (let id = 0; id < vocab.words.length; id++) {
    const word = vocab.words[id];
    const count = vocab.counts[id];
    if (!(Number.isSafeInteger(count) && count >= 0)) assert(false, `count ${count} of id ${id} is a whole number`);
    // Two numbers of at most 16 digits, two tabs, a newline and the word's bytes (≤ 3 per unit).
    if (at + 3 * word.length + 40 > buffer.length) {
      const larger = Buffer.allocUnsafe(2 * buffer.length + 3 * word.length);
      buffer.copy(larger, 0, 0, at);
      buffer = larger;
    }
    at = writeDigits(buffer, at, id);
    buffer[at++] = 0x09;
    let ascii = true;
    for (let i = 0; i < word.length; i++) {
      const c = word.charCodeAt(i);
      if (c >= 0x80) {
        ascii = false;
        break;
      }
      buffer[at + i] = c;
    }
    at += ascii ? word.length : buffer.write(word, at, 'utf8');
    buffer[at++] = 0x09;
    at = writeDigits(buffer, at, count);
    buffer[at++] = 0x0a;
  }
  return buffer.subarray(0, at);
}

/** Writes the decimal digits of the whole number n ≥ 0 at buffer[at ..]; returns where they end. */
function writeDigits(buffer: Buffer, at: number, n: number): number {
  let length = 1;
  for (let x = n; x >= 10; x = Math.floor(x / 10)) length++;
  for (let i = at + length - 1, x = n; i >= at; i--) {
    const quotient = Math.floor(x / 10);
    buffer[i] = 0x30 + (x - 10 * quotient);
    x = quotient;
  }
  return at + length;
}

/** Parses what `formatVocabulary` wrote, checking every line; `file` names the source in errors. */
export function parseVocabulary(text: string, file: string): Vocabulary {
  const lines = text.split('\n');
  const header = /^# quern vocabulary v1 types=(\d+) seen=(\d+) capped=(\d+)$/.exec(lines[0] ?? '');
  if (!header) throw new QuernError('corrupt', `${file}:1: not a quern vocabulary file`);
  const types = Number(header[1]);
  if (lines.length !== types + 2 || lines[types + 1] !== '') {
    throw new QuernError('corrupt', `${file}: expected ${types} entries, found ${lines.length - 2}`);
  }
  const words: string[] = [];
  const counts: number[] = [];
  for (let id = 0; id < types; id++) {
    const fields = lines[id + 1].split('\t');
    if (fields.length !== 3 || Number(fields[0]) !== id || !/^\d+$/.test(fields[2])) {
      throw new QuernError('corrupt', `${file}:${id + 2}: malformed vocabulary entry`);
    }
    words.push(fields[1]);
    counts.push(Number(fields[2]));
  }
  const eosId = words.indexOf(EOS);
  const unkId = words.indexOf(UNK);
  if (words[0] !== BOS || eosId < 1 || unkId < 1) throw new QuernError('corrupt', `${file}: markers missing`);
  return { words, counts, eosId, unkId, typesSeen: Number(header[2]), typesCapped: Number(header[3]) };
}
