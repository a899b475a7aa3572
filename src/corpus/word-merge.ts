/**
 * The vocabulary workers' word lists merged into one, on the main thread between the two passes
 * (the workers idle): each distinct word once with its counts added, and for each list where its
 * words went. Words arrive as UTF-8 bytes and are merged by those bytes in a word table, so no
 * string is made per occurrence of a word in the lists, only one per distinct word at the end.
 */
import { assert } from '../errors.ts';
import { BOS, EOS, UNK, type WordCounts } from './vocabulary.ts';
import { hashBytes, WordTable } from './word-table.ts';

/** Room made for the merged words per word of the first list: the other workers' lists add the
 *  words their chunks alone held (a few per cent of a large corpus's types; more for small ones,
 *  where the table then grows). */
const MERGED_WORDS_PER_LISTED = 1.25;

/** Words looked up together (as the tokenizer's batches, byte-tokenizer.ts). */
const MERGE_BATCH_WORDS = 256;

export class WordListMerger {
  /** Made when the first words arrive: sized for the first list, which the others mostly repeat
   *  (so it seldom grows, each growth re-placing every word). */
  private table: WordTable | undefined;
  private counts = new Float64Array(1 << 12);
  private readonly batch = { starts: new Int32Array(MERGE_BATCH_WORDS), ends: new Int32Array(MERGE_BATCH_WORDS), hashes: new Int32Array(MERGE_BATCH_WORDS) };

  private tableFor(words: number): WordTable {
    this.table ??= WordTable.sizedFor(Math.ceil(words * MERGED_WORDS_PER_LISTED));
    return this.table;
  }

  /** Adds `count` occurrences of a word given as a string (an earlier vocabulary's). */
  addWord(word: string, count: number): void {
    this.addCount(this.tableFor(0).internWord(word), count);
  }

  /**
   * Adds a list: word i is wordBytes[wordEnds[i − 1] (0 for i = 0) .. wordEnds[i]), seen counts[i]
   * times. Returns, for each of its words, its index in the merged list (`wordCounts`).
   */
  addList(wordBytes: Uint8Array, wordEnds: Uint32Array, counts: Float64Array): Uint32Array {
    assert(counts.length === wordEnds.length, `a count per word (${counts.length} counts, ${wordEnds.length} words)`);
    const into = new Int32Array(wordEnds.length);
    const table = this.tableFor(wordEnds.length);
    // A batch at a time through lookupBatch, so that the cache misses of its words overlap.
    const { starts, ends, hashes } = this.batch;
    for (let first = 0; first < wordEnds.length; first += MERGE_BATCH_WORDS) {
      const count = Math.min(MERGE_BATCH_WORDS, wordEnds.length - first);
      for (let j = 0; j < count; j++) {
        const i = first + j;
        const start = i === 0 ? 0 : wordEnds[i - 1];
        const end = wordEnds[i];
        // Checked with `if`: an assert's message would be built for every word.
        if (!(end > start && end <= wordBytes.length)) assert(false, `word ${i} ends at ${end}, after ${start} and within ${wordBytes.length} bytes`);
        starts[j] = start;
        ends[j] = end;
        hashes[j] = hashBytes(wordBytes, start, end);
      }
      table.lookupBatch(wordBytes, starts, ends, hashes, count, true, into, first);
    }
    for (let i = 0; i < into.length; i++) this.addCount(into[i], counts[i]);
    return new Uint32Array(into.buffer);
  }

  private addCount(entry: number, count: number): void {
    if (entry >= this.counts.length) {
      const counts = new Float64Array(2 * this.counts.length);
      counts.set(this.counts);
      this.counts = counts;
    }
    this.counts[entry] += count;
  }

  /** The merged words (decoded once each) and their counts, index = the entries `addList` gave. */
  wordCounts(): WordCounts {
    const table = this.tableFor(0);
    const size = table.size;
    for (const marker of [BOS, EOS, UNK]) assert(table.findWord(marker) < 0, `the word lists hold no marker (${marker})`);
    const words = new Array<string>(size);
    for (let entry = 0; entry < size; entry++) words[entry] = table.word(entry);
    return { words, counts: this.counts.subarray(0, size) };
  }
}
