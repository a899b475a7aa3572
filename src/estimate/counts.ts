/**
 * Count tables: what the estimators read. Per order, the distinct n-grams (word-id tuples, sorted,
 * see rows.ts) with their raw counts and, for the orders below the highest, their continuation
 * counts N1+(• x) (the number of distinct words seen right before x).
 *
 * For big jobs the count store supplies these per partition; for small corpora, tests and the
 * library, `countSentences` and `countCorpus` build them in memory following DESIGN.md:
 * each sentence is wrapped as `<s> w1 … wm </s>`, n-grams of orders 1..N are those that end at a
 * predicted position (1..m+1), so `<s>` is never a unigram and only ever begins an n-gram.
 */
import { assert, QuernError } from '../errors.ts';
import { ORDER_MAX } from '../limits.ts';
import { BOS, BOS_ID, EOS, UNK, buildVocabulary, type VocabCap, type Vocabulary } from '../corpus/vocabulary.ts';
import { compareRow, searchRows } from './rows.ts';

/** The part of the vocabulary a model needs: words by id (id 0 is `<s>`), and the two markers. */
export type ModelVocabulary = Pick<Vocabulary, 'words' | 'eosId' | 'unkId'>;

/** The n-grams of one order with their counts. */
export interface NgramTable {
  order: number;
  /** Rows of `order` ids, sorted ascending, distinct (see rows.ts). */
  ids: Uint32Array;
  /** Raw count of each row, an integer ≥ 1. */
  counts: Float64Array;
  /**
   * N1+(• x) of each row, aligned with `counts`, for orders below the highest; null where not
   * supplied (the Kneser-Ney estimators then compute it from the next order's rows). An n-gram that
   * begins with `<s>` has no word before it: its continuation count is 0.
   */
  continuation: Float64Array | null;
}

/** All the counts an estimator reads. */
export interface CountTables {
  /** Highest order N. */
  order: number;
  vocabulary: ModelVocabulary;
  /** The vocabulary cap applied at count time (recorded in the model); null when none. */
  vocabularyCap: VocabCap | null;
  /** tables[n − 1] holds the n-grams of order n, for n = 1..N. */
  tables: NgramTable[];
}

/** Number of rows of a table. */
export function rowCount(table: NgramTable): number {
  return table.counts.length;
}

/** Vocabulary size V: word types plus `</s>` and `<unk>`, without `<s>`. */
export function vocabularySize(vocabulary: ModelVocabulary): number {
  return vocabulary.words.length - 1;
}

/**
 * Counts the n-grams of orders 1..`order` of sentences given as word ids (1..V, without markers;
 * words outside the vocabulary already mapped to `<unk>`), with continuation counts for the orders
 * below `order`. Everything is held in memory: this is the path for small corpora and tests.
 *
 * How: the wrapped sentences are laid end to end, and each order is built from the one below. The
 * n-gram of order n+1 ending at position p is the n-gram ending at p−1 followed by the word at p, so
 * it is identified by the number (row of that n-gram)·(V+1) + word; sorting these numbers orders the
 * n-grams lexicographically (the rows are in that order already), equal numbers are counted, and a
 * binary search gives every position the row of its n-gram for the next order. The suffix of the
 * (n+1)-gram ending at p is the n-gram ending at p, which gives the continuation counts.
 */
export function countSentences(
  sentences: ReadonlyArray<ArrayLike<number>>,
  order: number,
  vocabulary: ModelVocabulary,
  vocabularyCap: VocabCap | null = null,
): CountTables {
  checkOrder(order);
  const size = vocabularySize(vocabulary);
  let positions = 0;
  for (const sentence of sentences) positions += sentence.length + 2;
  const words = new Uint32Array(positions);
  /** Distance of each position from its sentence's `<s>`. */
  const offsets = new Uint32Array(positions);
  let position = 0;
  for (const sentence of sentences) {
    offsets[position] = 0;
    words[position++] = BOS_ID;
    for (let i = 0; i < sentence.length; i++) {
      const id = sentence[i];
      if (!Number.isInteger(id) || id < 1 || id > size || id === vocabulary.eosId) {
        throw new RangeError(`sentence word ids must be vocabulary ids in [1, ${size}] other than </s> (got ${id})`);
      }
      offsets[position] = i + 1;
      words[position++] = id;
    }
    offsets[position] = sentence.length + 1;
    words[position++] = vocabulary.eosId;
  }
  if (positions * (size + 1) > Number.MAX_SAFE_INTEGER) {
    throw new QuernError('limit', `${positions} positions with a vocabulary of ${size} are too many to count in memory; use the count stage`);
  }

  // Order 1: counts by id; a position's "row" for building order 2 is its id (`<s>` included).
  const unigramCounts = new Float64Array(size + 1);
  for (let p = 0; p < positions; p++) if (offsets[p] > 0) unigramCounts[words[p]]++;
  const unigramRows: number[] = [];
  for (let id = 1; id <= size; id++) if (unigramCounts[id] > 0) unigramRows.push(id);
  const tables: NgramTable[] = [{
    order: 1,
    ids: Uint32Array.from(unigramRows),
    counts: Float64Array.from(unigramRows, (id) => unigramCounts[id]),
    continuation: null,
  }];
  let rowAt = Int32Array.from(words);

  for (let n = 2; n <= order; n++) {
    const previous = tables[n - 2];
    // Keys of the n-grams, one per position that ends one.
    let keyCount = 0;
    for (let p = 0; p < positions; p++) if (offsets[p] >= n - 1 && offsets[p] > 0) keyCount++;
    const keys = new Float64Array(keyCount);
    let next = 0;
    for (let p = 0; p < positions; p++) if (offsets[p] >= n - 1 && offsets[p] > 0) keys[next++] = rowAt[p - 1] * (size + 1) + words[p];
    keys.sort();
    let rows = 0;
    for (let j = 0; j < keyCount; j++) if (j === 0 || keys[j] !== keys[j - 1]) rows++;
    const unique = new Float64Array(rows);
    const counts = new Float64Array(rows);
    let row = -1;
    for (let j = 0; j < keyCount; j++) {
      if (j === 0 || keys[j] !== keys[j - 1]) unique[++row] = keys[j];
      counts[row]++;
    }
    const ids = new Uint32Array(rows * n);
    for (let r = 0; r < rows; r++) {
      const prefix = Math.floor(unique[r] / (size + 1));
      const word = unique[r] - prefix * (size + 1);
      if (n === 2) ids[r * 2] = prefix;
      else for (let i = 0; i < n - 1; i++) ids[r * n + i] = previous.ids[prefix * (n - 1) + i];
      ids[r * n + n - 1] = word;
    }
    // Each position's row at this order, and the continuation counts of the order below.
    const nextRowAt = new Int32Array(positions).fill(-1);
    const continuation = new Float64Array(n === 2 ? size + 1 : rowCount(previous));
    const counted = new Uint8Array(rows);
    for (let p = 0; p < positions; p++) {
      if (!(offsets[p] >= n - 1 && offsets[p] > 0)) continue;
      const key = rowAt[p - 1] * (size + 1) + words[p];
      let low = 0;
      let high = rows - 1;
      while (low < high) {
        const middle = (low + high) >>> 1;
        if (unique[middle] < key) low = middle + 1;
        else high = middle;
      }
      nextRowAt[p] = low;
      if (counted[low] === 0) {
        counted[low] = 1;
        continuation[rowAt[p]]++;
      }
    }
    previous.continuation = n === 2 ? Float64Array.from(previous.ids, (id) => continuation[id]) : continuation;
    tables.push({ order: n, ids, counts, continuation: null });
    rowAt = nextRowAt;
  }
  return { order, vocabulary, vocabularyCap, tables };
}

/**
 * Builds the vocabulary of tokenised sentences (DESIGN.md: word types plus `</s>` and `<unk>`;
 * ids by count, see corpus/vocabulary.ts) and counts them: the in-memory path for small corpora.
 * A literal `<s>`, `</s>` or `<unk>` token stands for an unknown word, as the tokenizer treats it.
 */
export function countCorpus(sentences: ReadonlyArray<readonly string[]>, order: number, vocabularyCap: VocabCap | null = null): CountTables {
  checkOrder(order);
  const wordCounts = new Map<string, number>();
  let unkSeen = 0;
  let sentenceCount = 0;
  for (const sentence of sentences) {
    if (sentence.length === 0) continue;
    sentenceCount++;
    for (const word of sentence) {
      if (word === BOS || word === EOS || word === UNK) unkSeen++;
      else wordCounts.set(word, (wordCounts.get(word) ?? 0) + 1);
    }
  }
  const vocabulary = buildVocabulary(wordCounts, sentenceCount, unkSeen, vocabularyCap ?? {});
  const ids = wordIdMap(vocabulary);
  const idSentences = sentences.filter((sentence) => sentence.length > 0).map((sentence) => sentenceIds(ids, vocabulary, sentence).ids);
  return countSentences(idSentences, order, vocabulary, vocabularyCap);
}

/** Word → id map of a vocabulary, for the vocabulary words proper (not `<s>`). */
export function wordIdMap(vocabulary: ModelVocabulary): Map<string, number> {
  const map = new Map<string, number>();
  for (let id = 1; id < vocabulary.words.length; id++) map.set(vocabulary.words[id], id);
  return map;
}

/**
 * Maps a tokenised sentence to vocabulary ids. A word outside the vocabulary, and a literal marker
 * (`<s>`, `</s>`, `<unk>`), becomes `<unk>` and is counted as out of vocabulary.
 */
export function sentenceIds(idOf: ReadonlyMap<string, number>, vocabulary: ModelVocabulary, words: readonly string[]): { ids: number[]; oov: number } {
  const ids: number[] = [];
  let oov = 0;
  for (const word of words) {
    const id = word === EOS || word === UNK ? undefined : idOf.get(word);
    if (id === undefined) {
      ids.push(vocabulary.unkId);
      oov++;
    } else ids.push(id);
  }
  return { ids, oov };
}

/**
 * Continuation counts N1+(• x) of every order below the highest, computed from the next order's
 * rows: each n-gram w1..wn (n ≥ 2) adds one to its suffix w2..wn. Tables that already carry them
 * are left as they are.
 */
export function withContinuationCounts(counts: CountTables): CountTables {
  const tables = counts.tables.map((table, index) => {
    const n = index + 1;
    if (n === counts.order || table.continuation !== null) return table;
    const higher = counts.tables[index + 1];
    const continuation = new Float64Array(rowCount(table));
    const higherRows = rowCount(higher);
    for (let row = 0; row < higherRows; row++) {
      const suffixRow = searchRows(table.ids, n, rowCount(table), higher.ids, row * (n + 1) + 1);
      if (!(suffixRow >= 0)) assert(false, `the suffix of every n-gram of order ${n + 1} is an n-gram of order ${n}`);
      continuation[suffixRow] += 1;
    }
    return { ...table, continuation };
  });
  return { ...counts, tables };
}

/** The same counts seen as a model of a lower order: tables 1..`order` (continuation counts kept). */
export function truncateCounts(counts: CountTables, order: number): CountTables {
  if (!Number.isInteger(order) || order < 1 || order > counts.order) {
    throw new RangeError(`order must be an integer in [1, ${counts.order}] (got ${order})`);
  }
  const tables = counts.tables.slice(0, order).map((table, index) => (index + 1 === order ? { ...table, continuation: null } : table));
  return { ...counts, order, tables };
}

function checkOrder(order: number): void {
  if (!Number.isInteger(order) || order < 1 || order > ORDER_MAX) {
    throw new QuernError('config', `order must be an integer in [1, ${ORDER_MAX}] (got ${order})`);
  }
}

/**
 * Asserts the documented shape of count tables: N tables of orders 1..N, rows sorted and distinct,
 * ids in [0, V], `<s>` only as the first id and never a unigram, counts integers ≥ 1, continuation
 * counts (where given) aligned and ≥ 0. The store builds them, so a bad one is a programmer error.
 */
export function checkCountTables(counts: CountTables): void {
  assert(Number.isInteger(counts.order) && counts.order >= 1 && counts.order <= ORDER_MAX, `count tables: order in [1, ${ORDER_MAX}]`);
  assert(counts.tables.length === counts.order, 'count tables: one table per order');
  const size = vocabularySize(counts.vocabulary);
  const { eosId, unkId, words } = counts.vocabulary;
  assert(words[BOS_ID] === BOS && words[eosId] === EOS && words[unkId] === UNK, 'count tables: vocabulary holds the markers at their ids');
  counts.tables.forEach((table, index) => {
    const n = index + 1;
    const rows = rowCount(table);
    assert(table.order === n && table.ids.length === rows * n, `count tables: table ${index} is of order ${n} with ${n} ids per row`);
    assert(table.continuation === null || table.continuation.length === rows, `count tables: continuation counts of order ${n} aligned with the rows`);
    for (let row = 0; row < rows; row++) {
      const count = table.counts[row];
      if (!(Number.isSafeInteger(count) && count >= 1)) assert(false, `count tables: order ${n} count ${count} is an integer ≥ 1`);
      for (let i = 0; i < n; i++) {
        const id = table.ids[row * n + i];
        if (!(id <= size && (id !== BOS_ID || (i === 0 && n >= 2)))) assert(false, `count tables: order ${n} id ${id} in range, <s> only first`);
      }
      if (!(row === 0 || compareRow(table.ids, n, row - 1, table.ids, row * n, n) < 0)) assert(false, `count tables: order ${n} rows sorted and distinct`);
      if (table.continuation !== null) {
        const continuation = table.continuation[row];
        assert(Number.isSafeInteger(continuation) && continuation >= 0, `count tables: continuation counts are integers ≥ 0`);
      }
    }
  });
}
