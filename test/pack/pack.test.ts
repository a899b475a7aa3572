/**
 * The model file against the in-memory model: every estimator's lookups, the state API, the
 * vocabulary, scoring, deterministic bytes, the recorded description, atomic writes.
 */
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { basename, join } from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { countCorpus, sentenceIds, truncateCounts, wordIdMap } from '../../src/estimate/counts.ts';
import { logProb, sentenceLogProbs, type LanguageModel } from '../../src/estimate/model.ts';
import { faultyFs, nodeFs } from '../../src/job/fsio.ts';
import { openModel, type PackedModel } from '../../src/pack/reader.ts';
import { packModel, packModelSource, type PackOptions } from '../../src/pack/writer.ts';
import { removePackTemporariesSync } from '../../src/pack/temporaries.ts';
import { modelSource, type ModelRowBatch, type ModelSource } from '../../src/estimate/model-source.ts';
import { seededRandom } from '../support/seeded.ts';
import { estimateWith, histories, markovCorpus, NORMALISED_METHODS } from '../estimate/support.ts';
import { compareAlongSentences, expectClose, temporaryDirectory } from './support.ts';

const { dir, remove } = temporaryDirectory('pack');
afterAll(remove);
let fileIndex = 0;

async function packAndOpen(model: LanguageModel, options: Partial<PackOptions> = {}): Promise<PackedModel> {
  const filePath = join(dir, `m${fileIndex++}.qm`);
  await packModel(model, { fingerprint: 'test', ...options }, nodeFs, filePath);
  return openModel(filePath);
}

const train = markovCorpus(7, 300, 40, 12);
const heldOut = markovCorpus(8, 60, 40, 12);
const testText = markovCorpus(9, 60, 48, 12); // 8 word types never seen in training: OOVs
const counts = countCorpus(train, 4);
const idOf = wordIdMap(counts.vocabulary);
const testIds = [...train.slice(0, 60), ...testText].map((words) => sentenceIds(idOf, counts.vocabulary, words).ids);

/** Every (history, word) of the histories to check × every vocabulary word: packed vs in-memory. */
function compareAllHistories(model: LanguageModel, packed: PackedModel, tolerance: number): number {
  const words = counts.vocabulary.words;
  const size = words.length - 1;
  let compared = 0;
  for (const history of histories(train, model.order, words, 150, 11)) {
    const ids = history.map((word) => words.indexOf(word));
    for (let word = 1; word <= size; word++) {
      const expected = logProb(model, ids, word);
      const found = packed.logProb(ids, word);
      if (found.order !== expected.order) expect(found.order, `order after [${history.join(' ')}] of ${words[word]}`).toBe(expected.order);
      expectClose(found.log10Prob, expected.log10Prob, tolerance);
      compared++;
    }
  }
  return compared;
}

describe('a packed model answers as the in-memory model', () => {
  for (const method of [...NORMALISED_METHODS, 'stupid-backoff'] as const) {
    test(`${method}: float64 equals the in-memory lookup to 1e-9, float32 to 1e-6 relative; the state API equals the stateless lookup`, async () => {
      const model = estimateWith(method, counts, heldOut);
      const exact = await packAndOpen(model, { floatBits: 64 });
      expect(compareAllHistories(model, exact, 1e-9)).toBeGreaterThan(50_000);
      expect(compareAlongSentences(model, exact, testIds, 1e-9)).toBeGreaterThan(500);
      const single = await packAndOpen(model, { floatBits: 32 });
      compareAlongSentences(model, single, testIds, 1e-6);
    });
  }

  test('cutoffs (contexts whose n-grams were all dropped, an order left empty): modified Kneser-Ney and Katz', async () => {
    for (const method of ['modified-kneser-ney', 'katz'] as const) {
      for (const cutoffs of [[1, 2, 2, 3], [1, 2, 1000, 1000]]) {
        const model = estimateWith(method, counts, heldOut, cutoffs);
        const packed = await packAndOpen(model, { floatBits: 64 });
        expect(packed.ngrams).toEqual(model.orders.map((table) => table.log10Prob.length));
        if (cutoffs[3] === 1000) expect(packed.ngrams[3]).toBe(0);
        compareAllHistories(model, packed, 1e-9);
        compareAlongSentences(model, packed, testIds, 1e-9);
      }
    }
  });

  test('orders 1, 2 and 5', async () => {
    const five = countCorpus(train, 5);
    const fiveIds = testText.map((words) => sentenceIds(wordIdMap(five.vocabulary), five.vocabulary, words).ids);
    for (const order of [1, 2, 5]) {
      const model = estimateWith('modified-kneser-ney', truncateCounts(five, order), []);
      const packed = await packAndOpen(model, { floatBits: 64 });
      expect(packed.order).toBe(order);
      expect(packed.beginState().history).toEqual(order === 1 ? [] : [0]);
      compareAlongSentences(model, packed, fiveIds, 1e-9);
    }
  });

  test('a state can be extended with several words (it is not changed by advance)', async () => {
    const model = estimateWith('kneser-ney', counts, heldOut);
    const packed = await packAndOpen(model);
    const random = seededRandom(5);
    let state = packed.beginState();
    const history = [0];
    for (let step = 0; step < 300; step++) {
      const before = state.history.slice();
      const alternatives = Array.from({ length: 3 }, () => 1 + Math.floor(random() * packed.vocabularySize));
      for (const word of alternatives) expect(packed.advance(state, word).log10Prob).toBe(packed.logProb(history, word).log10Prob);
      expect(state.history).toEqual(before);
      const next = alternatives[0];
      state = packed.advance(state, next).state;
      history.push(next);
    }
  });

  test('word ids are checked: <s> and ids outside [1, V] are refused', async () => {
    const packed = await packAndOpen(estimateWith('witten-bell', counts, heldOut));
    for (const word of [0, -1, packed.vocabularySize + 1, 1.5, Number.NaN]) {
      expect(() => packed.logProb([0], word)).toThrow(RangeError);
      expect(() => packed.advance(packed.beginState(), word)).toThrow(RangeError);
    }
    expect(() => packed.logProb([packed.vocabularySize + 1], 1)).toThrow(RangeError);
  });
});

describe('vocabulary and sentences', () => {
  test('wordId and word: every word, markers, unknown words, UTF-8 beyond ASCII', async () => {
    const words = ['café', 'naïve', '北京', '😀', 'a', 'ab', 'b'];
    const random = seededRandom(3);
    const sentences = Array.from({ length: 80 }, () => Array.from({ length: 1 + Math.floor(random() * 6) }, () => words[Math.floor(random() * words.length)]));
    const model = estimateWith('modified-kneser-ney', countCorpus(sentences, 3), []);
    const packed = await packAndOpen(model);
    model.vocabulary.words.forEach((word, id) => {
      expect(packed.wordId(word)).toBe(id);
      expect(packed.word(id)).toBe(word);
    });
    expect(packed.wordId('<s>')).toBe(0);
    for (const unknown of ['', 'cafe', 'café!', '北', 'x'.repeat(1000), '😀😀']) expect(packed.wordId(unknown)).toBe(-1);
    expect(() => packed.word(packed.vocabularySize + 1)).toThrow(RangeError);
  });

  test('scoreSentence: per-token log10 p as sentenceLogProbs; OOVs and literal markers are <unk>; totals as perplexity counts them', async () => {
    const model = estimateWith('modified-kneser-ney', counts, heldOut);
    const packed = await packAndOpen(model, { floatBits: 64 });
    const sentences = [...testText.slice(0, 30), ['w1', '<unk>', 'w2', '</s>', '<s>', 'never-seen', 'w3'], []];
    for (const words of sentences) {
      const { ids, oov } = sentenceIds(idOf, counts.vocabulary, words);
      const expected = sentenceLogProbs(model, ids);
      const score = packed.scoreSentence(words);
      expect(score.tokens.map((token) => token.id)).toEqual([...ids, counts.vocabulary.eosId]);
      expect(score.tokens.map((token) => token.word)).toEqual([...words, '</s>']);
      expect(score.oov).toBe(oov);
      score.tokens.forEach((token, i) => expectClose(token.log10Prob, expected[i], 1e-9));
      const withUnk = expected.reduce((a, b) => a + b, 0);
      const withoutOov = expected.reduce((sum, value, i) => (i < ids.length && score.tokens[i].oov ? sum : sum + value), 0);
      expectClose(score.log10ProbWithUnk, withUnk, 1e-9);
      expectClose(score.log10Prob, withoutOov, 1e-9);
    }
    expect(packed.scoreSentence(['w1', '<unk>', '</s>', '<s>']).oov).toBe(3);
  });
});

/**
 * The model as a source that hands out its rows in batches of 1..`batchMax` rows (copies, seeded
 * sizes), and records which orders are being read at the same moment.
 */
function rebatchedSource(model: LanguageModel, batchMax: number, seed: number): { source: ModelSource; ordersOpenMax: () => number; adjacent: () => boolean; reads: () => number[] } {
  const inner = modelSource(model);
  const random = seededRandom(seed);
  const open = new Map<number, number>();
  let ordersOpenMax = 0;
  let adjacent = true;
  const reads = model.orders.map(() => 0);
  return {
    ordersOpenMax: () => ordersOpenMax,
    reads: () => reads,
    adjacent: () => adjacent,
    source: {
      header: inner.header,
      rowCounts: inner.rowCounts,
      async *rows(order: number): AsyncIterable<ModelRowBatch> {
        reads[order - 1]++;
        open.set(order, (open.get(order) ?? 0) + 1);
        const orders = [...open.keys()].filter((n) => (open.get(n) ?? 0) > 0);
        ordersOpenMax = Math.max(ordersOpenMax, orders.length);
        if (orders.length === 2 && Math.abs(orders[0] - orders[1]) !== 1) adjacent = false;
        try {
          for await (const batch of inner.rows(order)) {
            for (let start = 0; start < batch.rows; ) {
              const rows = Math.min(batch.rows - start, 1 + Math.floor(random() * batchMax));
              yield {
                rows,
                ids: batch.ids.slice(start * order, (start + rows) * order),
                log10Prob: batch.log10Prob.slice(start, start + rows),
                log10BackOff: batch.log10BackOff.slice(start, start + rows),
              };
              start += rows;
            }
          }
        } finally {
          open.set(order, (open.get(order) ?? 1) - 1);
        }
      },
    },
  };
}

describe('the streaming writer', () => {
  test('packModelSource with any batch sizes writes the bytes of packModel, reading at most two neighbouring orders at once, and each order at most twice', async () => {
    for (const method of ['modified-kneser-ney', 'katz'] as const) {
      const model = estimateWith(method, counts, heldOut, method === 'katz' ? [1, 2, 2, 3] : undefined);
      for (const options of [{ floatBits: 32 }, { floatBits: 64 }, { quantBits: 8 }, { quantBits: 16 }] as const) {
        const whole = join(dir, `whole-${fileIndex}.qm`);
        const streamed = join(dir, `streamed-${fileIndex++}.qm`);
        const expected = await packModel(model, { ...options, fingerprint: 's' }, nodeFs, whole);
        const { source, ordersOpenMax, adjacent, reads } = rebatchedSource(model, 1 + (fileIndex % 50), fileIndex);
        const summary = await packModelSource(source, { ...options, fingerprint: 's' }, nodeFs, streamed);
        expect(readFileSync(streamed).equals(readFileSync(whole))).toBe(true);
        expect({ ...summary, filePath: '' }).toEqual({ ...expected, filePath: '' });
        expect(ordersOpenMax()).toBe(2);
        expect(adjacent()).toBe(true);
        // Order n once for its own sections (spooled) and once beside order n − 1 for its children:
        // a streamed model (an estimate's merged result files) is not read once per section.
        expect(reads()).toEqual([1, 2, 2, 2]);
      }
    }
  });

  test('a pack in progress knows its temporary files: removePackTemporariesSync (what a stopped command runs) deletes the model\'s and the spools', async () => {
    const model = estimateWith('kneser-ney', counts, heldOut);
    const inner = modelSource(model);
    const sub = join(dir, 'stopped');
    await nodeFs.mkdir(sub);
    const target = join(sub, 'model.qm');
    let release = (): void => undefined;
    const held = new Promise<void>((resolve) => (release = resolve));
    let reached = (): void => undefined;
    const paused = new Promise<void>((resolve) => (reached = resolve));
    // Order 3 waits: by then orders 1 and 2 are written, and order 2's pass has its spools open.
    const source: ModelSource = {
      header: inner.header,
      rowCounts: inner.rowCounts,
      async *rows(order: number, options?: { idsOnly?: boolean }): AsyncIterable<ModelRowBatch> {
        if (order === 3) {
          reached();
          await held;
        }
        yield* inner.rows(order, options);
      },
    };
    const packing = packModelSource(source, { fingerprint: '' }, nodeFs, target).catch((error: unknown) => error);
    await paused;
    const temporaries = readdirSync(sub).filter((name) => name.endsWith('.tmp')).sort();
    expect(temporaries).toEqual([`model.qm.${process.pid}.o2-back-off.tmp`, `model.qm.${process.pid}.o2-children.tmp`, `model.qm.${process.pid}.o2-probabilities.tmp`, `model.qm.${process.pid}.o2-words.tmp`, `model.qm.${process.pid}.tmp`]);
    expect(removePackTemporariesSync().map((file) => basename(file)).sort()).toEqual(temporaries);
    expect(readdirSync(sub)).toEqual([]);
    release();
    // The pack then fails (its file is gone) and leaves nothing.
    expect(await packing).toBeInstanceOf(QuernError);
    expect(readdirSync(sub)).toEqual([]);
    expect(removePackTemporariesSync()).toEqual([]);
  });

  test('a source that breaks its contract (rows out of order, a context missing) is an assertion failure, and leaves no file', async () => {
    const model = estimateWith('witten-bell', counts, heldOut);
    const target = join(dir, 'broken.qm');
    const swapped = { ...model, orders: model.orders.map((table) => ({ ...table, ids: table.ids.slice() })) };
    const ids = swapped.orders[2].ids;
    for (let i = 0; i < 3; i++) [ids[i], ids[3 + i]] = [ids[3 + i], ids[i]];
    await expect(packModelSource(modelSource(swapped), { fingerprint: '' }, nodeFs, target)).rejects.toThrow(/order 3: rows ascend and are distinct/);
    // The last trigram becomes (V, V, V): still the largest row, but its context (V, V) is no bigram.
    const orphan = { ...model, orders: model.orders.map((table) => ({ ...table, ids: table.ids.slice() })) };
    const size = counts.vocabulary.words.length - 1;
    orphan.orders[2].ids.fill(size, orphan.orders[2].ids.length - 3);
    expect(orphan.orders[1].ids.slice(-2)).not.toEqual(Uint32Array.from([size, size]));
    await expect(packModelSource(modelSource(orphan), { fingerprint: '' }, nodeFs, target)).rejects.toThrow(/order 3: every n-gram's context is a row of order 2/);
    expect(existsSync(target)).toBe(false);
    expect(readdirSync(dir).filter((name) => name.endsWith('.tmp'))).toEqual([]);
  });
});

describe('the file', () => {
  test('the same model gives the same bytes; so does the model read back from the file', async () => {
    for (const method of ['modified-kneser-ney', 'jelinek-mercer', 'stupid-backoff'] as const) {
      const model = estimateWith(method, counts, heldOut);
      for (const options of [{ floatBits: 64 }, { floatBits: 32 }, { quantBits: 8 }, { quantBits: 16 }] as const) {
        const a = join(dir, `same-a-${fileIndex}.qm`);
        const b = join(dir, `same-b-${fileIndex++}.qm`);
        await packModel(model, { ...options, fingerprint: 'f' }, nodeFs, a);
        await packModel(estimateWith(method, counts, heldOut), { ...options, fingerprint: 'f' }, nodeFs, b);
        expect(readFileSync(a).equals(readFileSync(b))).toBe(true);
        const again = join(dir, `same-c-${fileIndex++}.qm`);
        const original = await openModel(a);
        await packModel(original.toLanguageModel(), { ...options, fingerprint: 'f' }, nodeFs, again);
        if ('floatBits' in options) {
          // A model read back packs to the same bytes.
          expect(readFileSync(again).equals(readFileSync(a))).toBe(true);
        } else {
          // Quantised: the values read back are codebook values, which a new fit keeps exactly
          // (the codebook may lose values no code used), so the scores are the same.
          const repacked = await openModel(again);
          for (const words of testText.slice(0, 20)) expect(repacked.scoreSentence(words)).toEqual(original.scoreSentence(words));
        }
      }
    }
  });

  test('records order, vocabulary size, n-grams per order, method and parameters, cutoffs, cap, fingerprint, flags', async () => {
    const model = estimateWith('katz', counts, heldOut, [1, 1, 2, 2]);
    const fingerprint = 'sha256:0123abcd — corpus ünïcode';
    const packed = await packAndOpen(model, { fingerprint, quantBits: 8 });
    expect(packed.version).toEqual({ major: 2, minor: 0 });
    expect(packed.order).toBe(4);
    expect(packed.vocabularySize).toBe(counts.vocabulary.words.length - 1);
    expect(packed.eosId).toBe(counts.vocabulary.eosId);
    expect(packed.unkId).toBe(counts.vocabulary.unkId);
    expect(packed.ngrams).toEqual(model.orders.map((table) => table.log10Prob.length));
    expect(packed.parameters).toEqual(model.parameters);
    expect(packed.cutoffs).toEqual([1, 1, 2, 2]);
    expect(packed.vocabularyCap).toBeNull();
    expect(packed.fingerprint).toBe(fingerprint);
    expect(packed.normalised).toBe(true);
    expect(packed.encodingName).toBe('8-bit quantised');
    const stupid = await packAndOpen(estimateWith('stupid-backoff', counts, heldOut));
    expect(stupid.normalised).toBe(false);
    expect(stupid.log10UnseenContextWeight).toBeCloseTo(Math.log10(0.4), 15);
    expect(stupid.encodingName).toBe('float32');
    // Sections: aligned, contiguous from the header on; then the section table and the footer end the file.
    let position = 128;
    for (const section of packed.sections) {
      expect(section.offset).toBe(position);
      expect(section.offset % 8).toBe(0);
      position = Math.ceil((section.offset + section.bytes) / 8) * 8;
    }
    expect(position + 32 * packed.sections.length + 32).toBe(packed.fileBytes);
  });

  test('toLanguageModel gives back the model (float64)', async () => {
    const model = estimateWith('absolute-discounting', counts, heldOut);
    const back = (await packAndOpen(model, { floatBits: 64 })).toLanguageModel();
    expect(back.vocabulary).toEqual({ words: model.vocabulary.words, eosId: model.vocabulary.eosId, unkId: model.vocabulary.unkId });
    back.orders.forEach((table, index) => {
      const original = model.orders[index];
      expect(table.ids).toEqual(original.ids);
      expect(table.contextRow).toEqual(original.contextRow);
      expect(table.log10Prob).toEqual(original.log10Prob);
    });
  });

  test('options are checked', async () => {
    const model = estimateWith('witten-bell', counts, heldOut);
    const target = join(dir, 'options.qm');
    await expect(packModel(model, { fingerprint: '', quantBits: 4 as 8 }, nodeFs, target)).rejects.toThrow(/quantBits must be 8 or 16/);
    await expect(packModel(model, { fingerprint: '', floatBits: 16 as 32 }, nodeFs, target)).rejects.toThrow(/floatBits must be 32 or 64/);
    await expect(packModel(model, { fingerprint: '', floatBits: 32, quantBits: 8 }, nodeFs, target)).rejects.toThrow(/not both/);
    await expect(packModel(model, { fingerprint: 'x'.repeat(5000) }, nodeFs, target)).rejects.toThrow(/fingerprint must be at most 4096 bytes/);
    expect(existsSync(target)).toBe(false);
  });

  test('written atomically: a failing file system leaves the previous file or none, and no temporary file', async () => {
    const sub = join(dir, 'atomic');
    await nodeFs.mkdir(sub);
    const target = join(sub, 'model.qm');
    const old = estimateWith('witten-bell', counts, heldOut);
    const next = estimateWith('kneser-ney', counts, heldOut);
    await packModel(old, { fingerprint: 'old' }, nodeFs, target);
    let failures = 0;
    for (let operations = 0; ; operations++) {
      const fs = faultyFs(nodeFs, { failAfterOperations: operations, mode: 'once', errno: 'EIO' });
      try {
        await packModel(next, { fingerprint: 'new' }, fs, target);
      } catch (error) {
        expect(error).toBeInstanceOf(QuernError);
        expect((error as QuernError).code).toBe('io');
        failures++;
      }
      expect(readdirSync(sub)).toEqual(['model.qm']);
      const fingerprint = (await openModel(target)).fingerprint;
      if (fs.operations() <= operations) break; // no fault was injected: it succeeded
      expect(['old', 'new']).toContain(fingerprint);
      await packModel(old, { fingerprint: 'old' }, nodeFs, target);
    }
    // The writer gathers its output into large writes: a small model's file is one write call, so
    // the faults hit the create, the write, the sync, the rename and the directory sync.
    expect(failures).toBeGreaterThanOrEqual(5);
    expect((await openModel(target)).fingerprint).toBe('new');
  });
});
