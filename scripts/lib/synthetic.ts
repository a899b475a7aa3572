/**
 * Seeded synthetic corpus for benchmarks: plain-text shards of invented words whose frequencies
 * follow a Zipf-like law, with enough local structure that bigrams and higher-order n-grams repeat
 * the way they do in real text.
 *
 * The model, built once from the seed:
 *   - a vocabulary of `vocabularyTypes` distinct invented word forms made of syllables; frequent
 *     ranks get short words (1 syllable), the tail gets longer ones (2–4 syllables);
 *   - a unigram draw with weight 1/(rank+offset)^exponent over the ranks (alias tables in bands of
 *     rank, see BandedSampler: one uniform number per word, mostly cache-resident);
 *   - for the `successorRanks` most frequent words, a few favourite followers each: after such a
 *     word the next word is, with probability `successorChance`, one of its followers;
 *   - a set of frequent phrases (2–6 words, themselves Zipf-weighted), inserted with probability
 *     `phraseChance` at each position — these make trigrams and longer n-grams recur.
 * Sentences have 5–40 tokens (mean about 17; the last one of a shard may be cut shorter to fit),
 * one per line, words separated by one space.
 *
 * Each shard draws from its own stream (seed, shard index), so the content of a shard does not
 * depend on how many shards are written before it, on buffer sizes or on timing. A shard of
 * `bytes` bytes is filled exactly: the last sentence stops at the last word that fits and any
 * remaining bytes are newlines (blank lines, which are not sentences).
 */
import { closeSync, fsyncSync, openSync, renameSync, writeSync } from 'node:fs';
import { AliasTable, BandedSampler, Prng, zipfWeights } from './prng.ts';

export interface SyntheticOptions {
  seed: number;
  /** Distinct word forms. */
  vocabularyTypes?: number;
  /** Exponent of the Zipf-like unigram law. */
  zipfExponent?: number;
  /** Offset added to the rank (flattens the very top a little, as in real text). */
  zipfOffset?: number;
  /** Number of the most frequent words that have favourite followers. */
  successorRanks?: number;
  /** Favourite followers per such word. */
  successorsPerWord?: number;
  /** Probability of taking a favourite follower when the previous word has them. */
  successorChance?: number;
  /** Number of frequent phrases. */
  phraseCount?: number;
  /** Probability of starting a phrase at a position. */
  phraseChance?: number;
  /** Shortest and longest sentence, in tokens. */
  sentenceTokensMin?: number;
  sentenceTokensMax?: number;
}

const DEFAULTS = {
  vocabularyTypes: 200_000,
  zipfExponent: 1.0,
  zipfOffset: 2.7,
  successorRanks: 20_000,
  successorsPerWord: 4,
  successorChance: 0.4,
  phraseCount: 20_000,
  phraseChance: 0.08,
  sentenceTokensMin: 5,
  sentenceTokensMax: 40,
} as const;

// Syllable parts: onset + nucleus + coda, all lower-case ASCII.
const ONSETS = ['', 'b', 'br', 'c', 'ch', 'd', 'dr', 'f', 'fl', 'g', 'gr', 'h', 'j', 'k', 'l', 'm', 'n', 'p', 'pl', 'qu', 'r', 's', 'sh', 'sk', 'st', 't', 'th', 'tr', 'v', 'w', 'z'];
const NUCLEI = ['a', 'e', 'i', 'o', 'u', 'ai', 'ea', 'ou', 'y', 'oo'];
const CODAS = ['', '', '', 'n', 'r', 'l', 's', 't', 'm', 'nd', 'st', 'ck', 'ng', 'x'];

/**
 * Random syllables can spell offensive English words. A form containing any of these is rejected.
 * They are stored rot13-encoded so the source reads cleanly; `rot13` below decodes them.
 */
const BLOCKED_ROT13 = ['shpx', 'fuvg', 'phag', 'pbpx', 'qvpx', 'snt', 'avtt', 'gjng', 'jnax', 'cvff', 'fyhg', 'juber', 'encr', 'anmv', 'gvgf', 'nefr', 'ovgpu', 'cbea', 'fcvp', 'xvxr', 'pbba', 'qlxr', 'ubzb', 'wvmm', 'phz', 'nany', 'nahf', 'chff', 'frk', 'avt', 'cbb', 'penc', 'gheq', 'ohz', 'uryy', 'qnza', 'xvyy', 'tbbx', 'puvax', 'cnxv', 'jbt', 'fulg', 'shx', 'shp', 'cuhpx'];
const BLOCKED = new RegExp(BLOCKED_ROT13.map(rot13).join('|'));

function rot13(text: string): string {
  return text.replace(/[a-z]/g, (c) => String.fromCharCode(((c.charCodeAt(0) - 97 + 13) % 26) + 97));
}

/** Longest word the syllable grammar can make (4 syllables of at most 2+2+2 bytes). */
const WORD_BYTES_MAX = 4 * 6;

/** Output buffer per shard writer; flushed with one write call when nearly full. */
const WRITE_BUFFER_BYTES = 8 << 20;

const SPACE = 0x20;
const NEWLINE = 0x0a;

/** The corpus model: vocabulary, unigram draw, followers and phrases. Build once, write many shards. */
export class SyntheticModel {
  readonly seed: number;
  readonly options: Required<SyntheticOptions>;
  /** All word forms back to back; word `rank` is wordBytes[wordStart[rank] .. wordStart[rank + 1]). */
  readonly wordBytes: Uint8Array;
  readonly wordStart: Uint32Array;
  private readonly unigram: BandedSampler;
  private readonly successors: Uint32Array;
  private readonly phraseWords: Uint32Array;
  private readonly phraseStart: Uint32Array;
  private readonly phrases: AliasTable;

  constructor(options: SyntheticOptions) {
    const o: Required<SyntheticOptions> = { ...DEFAULTS, ...options };
    if (!Number.isSafeInteger(o.seed)) throw new RangeError(`seed must be a safe integer, got ${o.seed}`);
    if (!Number.isInteger(o.vocabularyTypes) || o.vocabularyTypes < 10 || o.vocabularyTypes > 2_000_000) {
      throw new RangeError(`vocabularyTypes must be an integer in [10, 2000000], got ${o.vocabularyTypes}`);
    }
    if (!(o.sentenceTokensMin >= 1 && o.sentenceTokensMax >= o.sentenceTokensMin)) {
      throw new RangeError(`need 1 ≤ sentenceTokensMin ≤ sentenceTokensMax, got ${o.sentenceTokensMin}, ${o.sentenceTokensMax}`);
    }
    if (!(o.successorRanks >= 0 && o.successorRanks <= o.vocabularyTypes)) {
      throw new RangeError(`successorRanks must be in [0, vocabularyTypes], got ${o.successorRanks}`);
    }
    this.seed = o.seed;
    this.options = o;
    const rng = new Prng(o.seed, 0x5eed);

    // Vocabulary: distinct syllable strings; rank decides the number of syllables.
    const seen = new Set<string>();
    const forms: string[] = [];
    while (forms.length < o.vocabularyTypes) {
      const rank = forms.length;
      const syllableCount = rank < 150 ? 1 : rank < 3000 ? rng.intBetween(1, 2) : rank < 60_000 ? rng.intBetween(2, 3) : rng.intBetween(2, 4);
      let form = '';
      for (let s = 0; s < syllableCount; s++) form += rng.pick(ONSETS) + rng.pick(NUCLEI) + rng.pick(CODAS);
      if (seen.has(form) || BLOCKED.test(form)) continue;
      seen.add(form);
      forms.push(form);
    }
    const encoded = Buffer.from(forms.join(''), 'latin1');
    this.wordBytes = new Uint8Array(encoded.buffer, encoded.byteOffset, encoded.length);
    this.wordStart = new Uint32Array(o.vocabularyTypes + 1);
    let offset = 0;
    for (let rank = 0; rank < o.vocabularyTypes; rank++) {
      this.wordStart[rank] = offset;
      offset += forms[rank].length;
    }
    this.wordStart[o.vocabularyTypes] = offset;

    this.unigram = new BandedSampler(zipfWeights(o.vocabularyTypes, o.zipfExponent, o.zipfOffset));

    // Favourite followers of the frequent words, drawn from the unigram law itself.
    this.successors = new Uint32Array(o.successorRanks * o.successorsPerWord);
    for (let index = 0; index < this.successors.length; index++) this.successors[index] = this.unigram.draw(rng);

    // Frequent phrases of 2–6 words.
    const phraseStart = new Uint32Array(o.phraseCount + 1);
    const words: number[] = [];
    for (let p = 0; p < o.phraseCount; p++) {
      phraseStart[p] = words.length;
      const length = rng.intBetween(2, 6);
      for (let w = 0; w < length; w++) words.push(this.unigram.draw(rng));
    }
    phraseStart[o.phraseCount] = words.length;
    this.phraseStart = phraseStart;
    this.phraseWords = Uint32Array.from(words);
    this.phrases = new AliasTable(o.phraseCount > 0 ? zipfWeights(o.phraseCount, 1.0, 1) : [1]);
  }

  /** The word form of a rank (for tests and diagnostics; not used on the hot path). */
  word(rank: number): string {
    return Buffer.from(this.wordBytes.subarray(this.wordStart[rank], this.wordStart[rank + 1])).toString('latin1');
  }

  /**
   * Writes shard `shardIndex` of exactly `bytes` bytes, handing each filled buffer to `sink`
   * (the buffer is reused after `sink` returns, so `sink` must consume it synchronously).
   * Returns the number of sentences and tokens written.
   */
  writeShard(shardIndex: number, bytes: number, sink: (chunk: Uint8Array) => void): { sentences: number; tokens: number } {
    if (!Number.isSafeInteger(bytes) || bytes < 0) throw new RangeError(`bytes must be a non-negative safe integer, got ${bytes}`);
    if (!Number.isSafeInteger(shardIndex) || shardIndex < 0) throw new RangeError(`shardIndex must be a non-negative integer, got ${shardIndex}`);
    const o = this.options;
    const writer = new ShardWriter(new Prng(this.seed, shardIndex + 1), bytes, sink);
    const lengthSpan = o.sentenceTokensMax - o.sentenceTokensMin;
    const successorsPerWord = o.successorsPerWord;

    while (!writer.full && writer.written + 2 <= bytes) {
      // Sentence length: min of two uniforms gives more short sentences than long ones.
      writer.refillIfLow();
      const lengthTokens = o.sentenceTokensMin + Math.floor(lengthSpan * Math.min(writer.uniform(), writer.uniform()) + 0.5);
      let previous = -1;
      let phraseAt = 0;
      let phraseEnd = 0;
      for (let position = 0; position < lengthTokens; position++) {
        writer.refillIfLow();
        let rank: number;
        if (phraseAt < phraseEnd) {
          rank = this.phraseWords[phraseAt++];
        } else if (writer.uniform() < o.phraseChance) {
          const phrase = drawAlias(this.phrases, writer.uniform());
          phraseAt = this.phraseStart[phrase];
          phraseEnd = this.phraseStart[phrase + 1];
          rank = this.phraseWords[phraseAt++];
        } else if (previous >= 0 && previous < o.successorRanks && writer.uniform() < o.successorChance) {
          const u = writer.uniform();
          const pickIndex = Math.min(successorsPerWord - 1, Math.floor(u * u * successorsPerWord));
          rank = this.successors[previous * successorsPerWord + pickIndex];
        } else {
          rank = drawAlias(this.unigram, writer.uniform());
        }
        if (!writer.word(this.wordBytes, this.wordStart[rank], this.wordStart[rank + 1], position === 0)) break;
        previous = rank;
      }
      writer.endLine();
    }
    writer.finish();
    return { sentences: writer.sentences, tokens: writer.tokens };
  }
}

/** Draws from an alias table or banded sampler given one uniform number in [0, 1). */
function drawAlias(table: AliasTable | BandedSampler, uniform: number): number {
  return table.drawWith(uniform);
}

/** Uniform numbers drawn ahead in batches, so the hot loop reads an array instead of calling the PRNG. */
const UNIFORM_BATCH = 1 << 16;
/** Most uniforms a token can consume (phrase test, follower test and pick, one draw). */
const UNIFORMS_PER_TOKEN_MAX = 4;

/** Accumulates one shard's bytes into a reused buffer and keeps the shard exactly `bytes` long. */
class ShardWriter {
  full = false;
  written = 0; // bytes of the shard produced so far (flushed + in buffer)
  sentences = 0;
  tokens = 0;
  private used = 0; // bytes in `buffer`
  private inLine = 0; // tokens on the current line
  private readonly buffer: Uint8Array;
  private readonly flushAt: number;
  private readonly uniforms = new Float64Array(UNIFORM_BATCH);
  private uniformIndex = UNIFORM_BATCH;

  constructor(
    private readonly rng: Prng,
    private readonly bytes: number,
    private readonly sink: (chunk: Uint8Array) => void,
  ) {
    this.buffer = new Uint8Array(Math.max(1, Math.min(WRITE_BUFFER_BYTES, bytes)));
    this.flushAt = this.buffer.length - (WORD_BYTES_MAX + 2);
  }

  refillIfLow(): void {
    if (this.uniformIndex + UNIFORMS_PER_TOKEN_MAX <= UNIFORM_BATCH) return;
    // Keep the order of the sequence: move the unread tail to the front first.
    const tail = UNIFORM_BATCH - this.uniformIndex;
    this.uniforms.copyWithin(0, this.uniformIndex);
    for (let index = tail; index < UNIFORM_BATCH; index++) this.uniforms[index] = this.rng.next();
    this.uniformIndex = 0;
  }

  uniform(): number {
    return this.uniforms[this.uniformIndex++];
  }

  /** Appends a word (with a space before it unless it starts the line); false once the shard is full. */
  word(source: Uint8Array, start: number, end: number, first: boolean): boolean {
    const length = end - start;
    const separator = first ? 0 : 1;
    // Keep room for the newline that ends the line.
    if (this.written + separator + length + 1 > this.bytes) {
      this.full = true;
      return false;
    }
    if (this.used > this.flushAt) this.flush();
    const buffer = this.buffer;
    let used = this.used;
    if (separator === 1) buffer[used++] = SPACE;
    for (let index = start; index < end; index++) buffer[used++] = source[index];
    this.used = used;
    this.written += separator + length;
    this.inLine++;
    return true;
  }

  endLine(): void {
    if (this.inLine === 0) return;
    this.newline();
    this.sentences++;
    this.tokens += this.inLine;
    this.inLine = 0;
  }

  /** Fills what is left exactly with blank lines, then hands on the last buffer. */
  finish(): void {
    while (this.written < this.bytes) this.newline();
    this.flush();
  }

  private newline(): void {
    if (this.used >= this.buffer.length) this.flush();
    this.buffer[this.used++] = NEWLINE;
    this.written++;
  }

  private flush(): void {
    if (this.used > 0) this.sink(this.buffer.subarray(0, this.used));
    this.used = 0;
  }
}

export type CorpusShape = 'few-large' | 'many-small';

/** Shard counts of the two benchmark shapes. */
export const SHAPE_SHARDS: Record<CorpusShape, number> = { 'few-large': 2, 'many-small': 200 };

export interface ShardResult {
  path: string;
  bytes: number;
  sentences: number;
  tokens: number;
}

/** Size of shard `index` when `bytes` are split over `shardCount` shards (sizes differ by ≤ 1). */
export function shardBytes(bytes: number, shardCount: number, index: number): number {
  const base = Math.floor(bytes / shardCount);
  return base + (index < bytes % shardCount ? 1 : 0);
}

/** File name of shard `index`. */
export function shardName(index: number): string {
  return `shard-${String(index).padStart(5, '0')}.txt`;
}

/**
 * Writes one shard file at `path` (via `path.tmp`, fsync, rename), exactly `bytes` long.
 */
export function writeShardFile(model: SyntheticModel, shardIndex: number, bytes: number, path: string): ShardResult {
  const tmpPath = `${path}.tmp`;
  const fd = openSync(tmpPath, 'w');
  let result: { sentences: number; tokens: number };
  try {
    result = model.writeShard(shardIndex, bytes, (chunk) => {
      let offset = 0;
      while (offset < chunk.length) offset += writeSync(fd, chunk, offset, chunk.length - offset);
    });
    fsyncSync(fd);
  } finally {
    closeSync(fd);
  }
  renameSync(tmpPath, path);
  return { path, bytes, ...result };
}
