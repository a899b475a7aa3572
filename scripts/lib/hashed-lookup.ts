/**
 * The hashed layout of src/pack/hash-layout.ts (one table per order n ≥ 2, keyed by the context's
 * slot at order n − 1 and the word, records holding the key and the values) built in memory from a
 * packed model (`toModelSource`, the public walk), with lookups over it: for
 * scripts/bench-lookup-layout.ts to measure beside the file's own `step` and `stepBatch`. Values are
 * float32 (log10 p, and log10 back-off below the highest order); the tables' sizes with 8-bit codes
 * instead follow from the same layouts (`bytesWithValueBits`), since the placement depends on the
 * keys alone.
 */
import assert from 'node:assert/strict';
import type { ModelRowBatch, ModelSource } from '../../src/estimate/model-source.ts';
import { HashedOrderBuilder, hashedOrderBytes, type HashedOrder } from '../../src/pack/hash-layout.ts';
import type { PackedModel } from '../../src/pack/reader.ts';

export interface HashedOptions {
  /** Entries per slot, 0 < load < 1. */
  load: number;
  /** Slots per bucket. */
  bucketSlots: number;
  /** Word-aligned records (keys padded to 32 bits). */
  alignKeys: boolean;
}

/** float32 ↔ its bits. */
const floatBits = new Float32Array(1);
const bitsOfFloat = new Uint32Array(floatBits.buffer);
function toBits(value: number): number {
  floatBits[0] = value;
  return bitsOfFloat[0];
}

/**
 * The rows of order n ≥ 2 of `source` with each row's key: its context's slot at order n − 1
 * (`slotOf` of that order; at order 2 the context's id) and its word. The context is found by
 * walking order n − 1 in step (both ascend, and a context's rows are contiguous).
 */
async function* keyedRows(source: ModelSource, n: number, slotOf: Int32Array | null): AsyncGenerator<{ contexts: Uint32Array; words: Uint32Array; batch: ModelRowBatch }> {
  const below = source.rows(n - 1, { idsOnly: true })[Symbol.asyncIterator]();
  let belowBatch = (await below.next()).value as ModelRowBatch;
  let belowIndex = 0;
  let belowRow = 0;
  let row = 0;
  try {
    for await (const batch of source.rows(n)) {
      const contexts = new Uint32Array(batch.rows);
      const words = new Uint32Array(batch.rows);
      for (let j = 0; j < batch.rows; j++, row++) {
        for (;;) {
          let same = true;
          for (let i = 0; i < n - 1 && same; i++) same = belowBatch.ids[belowIndex * (n - 1) + i] === batch.ids[j * n + i];
          if (same) break;
          belowIndex++;
          belowRow++;
          if (belowIndex === belowBatch.rows) {
            const next = await below.next();
            assert(!next.done, `order ${n}: the context of row ${row} is not a row of order ${n - 1}`);
            belowBatch = next.value;
            belowIndex = 0;
          }
        }
        contexts[j] = slotOf === null ? belowRow : slotOf[belowRow];
        words[j] = batch.ids[j * n + n - 1];
      }
      yield { contexts, words, batch };
    }
  } finally {
    await below.return?.(undefined);
  }
}

export class HashedLookup {
  readonly order: number;
  /** The tables by order (index n ≥ 2). */
  readonly tables: HashedOrder[];
  private readonly unigramProb: Float32Array;
  private readonly unigramBackOff: Float32Array;
  // One stream's state: context slots by order (order 1: the word id), −1 when not in the model,
  // and their back-off weights.
  private readonly context = new Int32Array(8);
  private readonly contextBackOff = new Float64Array(8);
  private readonly found = new Int32Array(8);
  private length = 0;

  private constructor(order: number, tables: HashedOrder[], unigramProb: Float32Array, unigramBackOff: Float32Array) {
    this.order = order;
    this.tables = tables;
    this.unigramProb = unigramProb;
    this.unigramBackOff = unigramBackOff;
  }

  /** Bytes of the tables as built (float32 values). */
  get bytes(): number {
    return this.tables.reduce((sum, table) => sum + (table ? hashedOrderBytes(table.layout) : 0), 0);
  }

  /** Bytes of the same tables with values of `bits` bits instead (e.g. 8-bit codes). */
  bytesWithValueBits(bits: number): number {
    return this.tables.reduce((sum, table) => {
      if (!table) return sum;
      const layout = table.layout;
      // Codes are bit-packed: the key in its own bits, not padded.
      const valueBits = layout.valueBits.map(() => bits);
      const keyFieldBits = layout.wordBits + layout.remainderBits + layout.displacementBits;
      const recordBits = keyFieldBits + valueBits.reduce((a, b) => a + b, 0);
      return sum + hashedOrderBytes({ ...layout, keyFieldBits, valueBits, recordBits });
    }, 0);
  }

  /** Builds the tables of `model` (a normalised model: a context never seen backs off with weight 1). */
  static async build(model: PackedModel, options: HashedOptions, log: (line: string) => void): Promise<HashedLookup> {
    assert(model.log10UnseenContextWeight === 0, 'the experiment covers normalised models (unseen-context weight 1)');
    const source = model.toModelSource();
    const order = model.order;
    const unigramProb = new Float32Array(model.ngrams[0]);
    const unigramBackOff = new Float32Array(model.ngrams[0]);
    let at = 0;
    for await (const batch of source.rows(1)) {
      unigramProb.set(batch.log10Prob, at);
      if (batch.log10BackOff.length > 0) unigramBackOff.set(batch.log10BackOff, at);
      at += batch.rows;
    }
    const tables: HashedOrder[] = [];
    // Slot of each row of the order below (order 1: row = id), for the keys of this order.
    let slotOfContext: Int32Array | null = null;
    let contextSpace = model.ngrams[0];
    const started = performance.now();
    for (let n = 2; n <= order; n++) {
      const rows = model.ngrams[n - 1];
      const highest = n === order;
      const contextOf = slotOfContext;
      // Two passes over the order (HashedOrderBuilder): count the homes, then place the records.
      const builder = new HashedOrderBuilder({ rows, contextSpace, wordMax: model.vocabularySize, valueBits: highest ? [32] : [32, 32], load: options.load, bucketSlots: options.bucketSlots, alignKeys: options.alignKeys });
      for await (const { contexts, words } of keyedRows(source, n, contextOf)) for (let j = 0; j < words.length; j++) builder.count(contexts[j], words[j]);
      builder.endCounting();
      const slotOf = new Int32Array(rows);
      const values = [0, 0];
      let row = 0;
      for await (const { contexts, words, batch } of keyedRows(source, n, contextOf)) {
        for (let j = 0; j < words.length; j++, row++) {
          values[0] = toBits(batch.log10Prob[j]);
          values[1] = highest ? 0 : toBits(batch.log10BackOff[j]);
          slotOf[row] = builder.place(contexts[j], words[j], values);
        }
      }
      const table = builder.finish();
      tables[n] = table;
      slotOfContext = slotOf;
      contextSpace = table.layout.slots;
      const layout = table.layout;
      log(`order ${n}: ${rows.toLocaleString('en-US')} rows in ${layout.slots.toLocaleString('en-US')} slots, records of ${layout.recordBits} bits (key field ${layout.keyFieldBits}: word ${layout.wordBits}, remainder ${layout.remainderBits}, displacement ${layout.displacementBits}), ${((performance.now() - started) / 1000).toFixed(1)} s`);
    }
    return new HashedLookup(order, tables, unigramProb, unigramBackOff);
  }

  /** log10 p or back-off (field 0 or 1) of the entry at `slot` of order n. */
  private valueAt(n: number, slot: number, field: number): number {
    bitsOfFloat[0] = this.tables[n].value(slot, field);
    return floatBits[0];
  }

  /** Starts a sentence: the history is `<s>` (id 0). */
  reset(): void {
    this.length = this.order > 1 ? 1 : 0;
    this.context[1] = 0;
    this.contextBackOff[1] = this.unigramBackOff[0];
  }

  /** log10 p(word | the history), and the history moves past `word`: `PackedModel.step`'s rule. */
  step(word: number): number {
    const context = this.context;
    const backOffs = this.contextBackOff;
    const found = this.found;
    const length = this.length;
    const keep = length < this.order - 1 ? length + 1 : length;
    // Every order's probe at once: they depend only on the state, so their memory reads overlap.
    for (let k = length; k >= 1; k--) found[k] = context[k] >= 0 ? this.tables[k + 1].find(context[k], word) : -1;
    let answer = length;
    while (answer > 0 && found[answer] < 0) answer--;
    let backOff = 0;
    for (let k = length; k > answer; k--) if (context[k] >= 0) backOff += backOffs[k];
    const log10Prob = backOff + (answer > 0 ? this.valueAt(answer + 1, found[answer], 0) : this.unigramProb[word]);
    for (let k = keep - 1; k >= 1; k--) {
      const slot = found[k];
      context[k + 1] = slot;
      if (slot >= 0) backOffs[k + 1] = this.valueAt(k + 1, slot, 1);
    }
    if (keep > 0) {
      context[1] = word;
      backOffs[1] = this.unigramBackOff[word];
    }
    this.length = keep;
    return log10Prob;
  }

  /**
   * Σ log10 p of `sentences` (word ids, `</s>` last), scored `lanes` sentences at a time: per token,
   * order by order upwards, the homes of every lane still matching are read first (independent
   * loads that overlap), then searched. Stopping at the first order that misses needs the model to
   * keep the suffixes of its n-grams (as Quern's estimators do); the caller compares with `step`.
   */
  batchSum(sentences: number[][], lanes: number): number {
    const order = this.order;
    const stride = order + 1;
    const context = new Int32Array(lanes * stride);
    const backOffs = new Float64Array(lanes * stride);
    const found = new Int32Array(lanes * stride);
    const lengths = new Int32Array(lanes);
    const sentenceOf = new Int32Array(lanes).fill(-1);
    const position = new Int32Array(lanes);
    const answers = new Int32Array(lanes);
    const wordOf = new Int32Array(lanes);
    const active = new Int32Array(lanes);
    const homes = new Int32Array(lanes);
    let next = 0;
    let running = 0;
    let sum = 0;
    let touched = 0;
    const start = (lane: number): void => {
      if (next >= sentences.length) {
        sentenceOf[lane] = -1;
        return;
      }
      sentenceOf[lane] = next++;
      position[lane] = 0;
      lengths[lane] = order > 1 ? 1 : 0;
      context[lane * stride + 1] = 0;
      backOffs[lane * stride + 1] = this.unigramBackOff[0];
      running++;
    };
    for (let lane = 0; lane < lanes; lane++) start(lane);
    const wanted = new Float64Array(lanes);
    while (running > 0) {
      let count = 0;
      for (let lane = 0; lane < lanes; lane++) {
        if (sentenceOf[lane] < 0) continue;
        wordOf[lane] = sentences[sentenceOf[lane]][position[lane]];
        answers[lane] = 0;
        if (lengths[lane] >= 1) active[count++] = lane;
      }
      for (let k = 1; k < order && count > 0; k++) {
        const table = this.tables[k + 1];
        for (let j = 0; j < count; j++) {
          const lane = active[j];
          const z = table.z(context[lane * stride + k], wordOf[lane]);
          const home = table.home(z);
          homes[j] = home;
          wanted[j] = table.wantedOf(z, wordOf[lane]);
          touched += table.touch(home);
        }
        let kept = 0;
        for (let j = 0; j < count; j++) {
          const lane = active[j];
          const slot = table.findFrom(homes[j], wanted[j]);
          if (slot < 0) continue;
          answers[lane] = k;
          found[lane * stride + k] = slot;
          if (k + 1 <= lengths[lane]) active[kept++] = lane;
        }
        count = kept;
      }
      for (let lane = 0; lane < lanes; lane++) {
        if (sentenceOf[lane] < 0) continue;
        const base = lane * stride;
        const word = wordOf[lane];
        const length = lengths[lane];
        const keep = length < order - 1 ? length + 1 : length;
        const answer = answers[lane];
        let backOff = 0;
        for (let k = length; k > answer; k--) backOff += backOffs[base + k];
        sum += backOff + (answer > 0 ? this.valueAt(answer + 1, found[base + answer], 0) : this.unigramProb[word]);
        // The new history's contexts: the n-grams found (a longer one cannot exist once one misses).
        const kept = Math.min(answer, keep - 1);
        for (let k = kept; k >= 1; k--) {
          const slot = found[base + k];
          context[base + k + 1] = slot;
          backOffs[base + k + 1] = this.valueAt(k + 1, slot, 1);
        }
        context[base + 1] = word;
        backOffs[base + 1] = this.unigramBackOff[word];
        lengths[lane] = Math.min(keep, kept + 1);
        if (++position[lane] >= sentences[sentenceOf[lane]].length) {
          running--;
          start(lane);
        }
      }
    }
    // Keeps the touches from being optimised away (they are what overlaps the misses).
    if (touched === -1) sum += 1;
    return sum;
  }
}
