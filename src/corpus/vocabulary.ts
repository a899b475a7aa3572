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

/**
 * Word-count pairs in vocabulary order: count descending, ties by code points (UTF-8 bytes)
 * ascending. The words are grouped by count first and only each group is sorted: in a Zipf-like
 * vocabulary most words share a handful of small counts, and sorting each group alone takes 0.27×
 * the time of sorting all the pairs by (count, word) twice, as before (`npm run bench:vocabulary`).
 */
function rankWords(wordCounts: Iterable<[string, number]>): Array<[string, number]> {
  const byCount = new Map<number, string[]>();
  for (const [word, count] of wordCounts) {
    const words = byCount.get(count);
    if (words === undefined) byCount.set(count, [word]);
    else words.push(word);
  }
  const counts = [...byCount.keys()].sort((a, b) => b - a);
  const ranked: Array<[string, number]> = [];
  for (const count of counts) {
    const words = byCount.get(count)!;
    if (words.length > 1) words.sort(compareCodePoints);
    for (const word of words) ranked.push([word, count]);
  }
  return ranked;
}

/** Puts `entry` into `ranked` (in vocabulary order, rankWords) where it belongs. */
function insertRanked(ranked: Array<[string, number]>, entry: [string, number]): void {
  let low = 0;
  let high = ranked.length;
  while (low < high) {
    const middle = (low + high) >>> 1;
    const other = ranked[middle];
    if (other[1] > entry[1] || (other[1] === entry[1] && compareCodePoints(other[0], entry[0]) < 0)) low = middle + 1;
    else high = middle;
  }
  ranked.splice(low, 0, entry);
}

/**
 * Builds the vocabulary from word counts (which must not contain the markers), the number of
 * sentences, literal `<unk>` occurrences already counted, and an optional cap.
 */
export function buildVocabulary(wordCounts: Map<string, number>, sentences: number, unkSeen: number, cap: VocabCap): Vocabulary {
  assert(!wordCounts.has(BOS) && !wordCounts.has(EOS) && !wordCounts.has(UNK), 'word counts hold no markers');
  const entries = rankWords(wordCounts);
  const seen = entries.length;
  let kept = seen;
  if (cap.minCount !== undefined) {
    kept = 0;
    while (kept < entries.length && entries[kept][1] >= cap.minCount) kept++;
  }
  if (cap.top !== undefined) kept = Math.min(kept, cap.top);
  let unkCount = unkSeen;
  for (let i = kept; i < seen; i++) unkCount += entries[i][1];
  // The markers are put in their places (not part of the cap); `entries` is not needed after.
  const vocab = kept === seen ? entries : entries.slice(0, kept);
  insertRanked(vocab, [EOS, sentences]);
  insertRanked(vocab, [UNK, unkCount]);
  if (vocab.length + 1 > VOCAB_TYPES_MAX) {
    throw new QuernError('limit', `vocabulary of ${vocab.length} types exceeds ${VOCAB_TYPES_MAX}; cap it with --vocab-top or --vocab-min-count`);
  }
  const words = [BOS, ...vocab.map((e) => e[0])];
  const counts = [sentences, ...vocab.map((e) => e[1])];
  return {
    words,
    counts,
    eosId: words.indexOf(EOS),
    unkId: words.indexOf(UNK),
    typesSeen: seen,
    typesCapped: seen - kept,
  };
}

const VOCAB_FILE_HEADER = '# quern vocabulary v1';

/** Serialises the vocabulary as text: a header line, then `id<TAB>word<TAB>count` per line. */
export function formatVocabulary(vocab: Vocabulary): string {
  const lines = [`${VOCAB_FILE_HEADER} types=${vocab.words.length} seen=${vocab.typesSeen} capped=${vocab.typesCapped}`];
  for (let id = 0; id < vocab.words.length; id++) lines.push(`${id}\t${vocab.words[id]}\t${vocab.counts[id]}`);
  return lines.join('\n') + '\n';
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
