/**
 * Batched lookups (`stepBatch`, src/score/batch.ts) against the one-state API (`step`,
 * `scoreSentence`), which test/pack/pack.test.ts checks against the in-memory model to 1e-9: every
 * token's value and answering order must be the same, bit for bit, whatever the number of lanes,
 * the order, the value encoding or the method (stupid backoff: unseen contexts weigh α).
 */
import { join } from 'node:path';
import { afterAll, expect, test } from 'vitest';
import { countCorpus, truncateCounts } from '../../src/estimate/counts.ts';
import { logProb } from '../../src/estimate/model.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel, type PackedModel } from '../../src/pack/reader.ts';
import { packModel, type PackOptions } from '../../src/pack/writer.ts';
import { BatchScorer, scoreIdSentences, scoresInBatches, scoreSentences } from '../../src/score/batch.ts';
import { SCORE_BATCH_MODEL_BYTES_MIN, SCORE_BATCH_TOKENS } from '../../src/limits.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';

const { dir, remove } = temporaryDirectory('batch');
afterAll(remove);

const train = markovCorpus(61, 300, 40, 14);
// 8 word types never seen in training (OOVs), an empty sentence, literal markers.
const text = [...markovCorpus(62, 90, 48, 14), [], ['w1', '<unk>', '</s>', '<s>', 'unseen'], ['w2']];
const counts = countCorpus(train, 5);
let fileIndex = 0;

async function packed(order: number, method: 'modified-kneser-ney' | 'stupid-backoff', options: Partial<PackOptions>): Promise<PackedModel> {
  const path = join(dir, `m${fileIndex++}.qm`);
  await packModel(estimateWith(method, truncateCounts(counts, order), []), { fingerprint: '', ...options }, nodeFs, path);
  return openModel(path);
}

/** Each sentence's ids as `step` takes them: OOVs as `<unk>`, `</s>` last. */
function idsOf(model: PackedModel, sentences: string[][]): number[][] {
  return sentences.map((words) => [...words.map((word) => {
    const id = word === '</s>' || word === '<unk>' ? -1 : model.wordId(word);
    return id > 0 ? id : model.unkId;
  }), model.eosId]);
}

/** [log10 p, order] of every token, one sentence after another, with `step`. */
function stepped(model: PackedModel, sentences: number[][]): Array<Array<[number, number]>> {
  const state = model.newState();
  return sentences.map((sentence) => {
    model.resetState(state);
    return sentence.map((id) => [model.step(state, id), state.order] as [number, number]);
  });
}

test('stepBatch gives every token the value and order of step, bit for bit: orders 1, 2, 3, 5; float64, float32, 8-bit; stupid backoff; 1, 3, 64 and 500 lanes', async () => {
  const models = [
    await packed(5, 'modified-kneser-ney', { floatBits: 64 }),
    await packed(5, 'modified-kneser-ney', { quantBits: 8 }),
    await packed(3, 'modified-kneser-ney', { floatBits: 32 }),
    await packed(3, 'stupid-backoff', { floatBits: 64 }),
    await packed(2, 'modified-kneser-ney', { floatBits: 32 }),
    await packed(1, 'modified-kneser-ney', { floatBits: 64 }),
  ];
  let tokens = 0;
  const ordersSeen = new Set<number>();
  for (const model of models) {
    const sentences = idsOf(model, text);
    const expected = stepped(model, sentences);
    for (const lanes of [1, 3, 64, 500]) {
      const found = sentences.map((sentence) => sentence.map((): [number, number] => [Number.NaN, 0]));
      let previous = new Int32Array(sentences.length).fill(-1);
      scoreIdSentences(model, sentences, (sentence, position, log10Prob, order) => {
        expect(position, 'tokens of a sentence come in order').toBe(previous[sentence] + 1);
        previous[sentence] = position;
        found[sentence][position] = [log10Prob, order];
      }, lanes);
      for (let s = 0; s < sentences.length; s++) {
        for (let i = 0; i < sentences[s].length; i++) {
          const [value, order] = found[s][i];
          if (!Object.is(value, expected[s][i][0]) || order !== expected[s][i][1]) {
            expect([value, order], `model of order ${model.order} (${model.encodingName}), ${lanes} lanes, sentence ${s}, token ${i}`).toEqual(expected[s][i]);
          }
          ordersSeen.add(order);
          tokens++;
        }
      }
      previous = new Int32Array(0);
    }
  }
  expect(tokens).toBeGreaterThan(10_000);
  // Every order answered some token: the back-off paths (seen and unseen contexts) were all taken.
  for (const order of [1, 2, 3, 4, 5]) expect(ordersSeen.has(order), `order ${order} answered`).toBe(true);
});

test('scoreSentences equals scoreSentence for every sentence (tokens, OOVs, sums), empty sentences included', async () => {
  const model = await packed(4, 'modified-kneser-ney', { floatBits: 32 });
  const sentences = [[], ...text, [], []];
  const expected = sentences.map((words) => model.scoreSentence(words));
  for (const lanes of [1, 7, 64]) expect(scoreSentences(model, sentences, lanes)).toEqual(expected);
});

test('stepBatch checks its arguments: word ids, a state given twice, the count', async () => {
  const model = await packed(3, 'modified-kneser-ney', { floatBits: 32 });
  const a = model.newState();
  const b = model.newState();
  const out = new Float64Array(2);
  for (const word of [0, -1, model.vocabularySize + 1, 1.5]) expect(() => model.stepBatch([a, b], [1, word], out)).toThrow(/word must be a vocabulary id/);
  expect(() => model.stepBatch([a, a], [1, 2], out)).toThrow(/states\[1\] appears twice/);
  expect(() => model.stepBatch([a, b], [1, 2], out, 3)).toThrow(/count must be an integer in \[0, 2\]/);
  expect(() => scoreIdSentences(model, [[1]], () => undefined, 0)).toThrow(/lanes must be an integer/);
  // The same states go on being usable after a refused call.
  model.resetState(a);
  model.resetState(b);
  model.stepBatch([a, b], [1, 2], out);
  const check = model.newState();
  expect(out[1]).toBe(model.step(check, 2));
});

test('BatchScorer hands back every sentence in order across groups of SCORE_BATCH_TOKENS tokens, each as scoreSentence scores it', async () => {
  const model = await packed(3, 'modified-kneser-ney', { floatBits: 32 });
  const sentences = markovCorpus(63, 20_000, 48, 14);
  const tokens = sentences.reduce((sum, words) => sum + words.length + 1, 0);
  expect(tokens, 'more than two groups').toBeGreaterThan(2 * SCORE_BATCH_TOKENS);
  const scores: ReturnType<PackedModel['scoreSentence']>[] = [];
  const scorer = new BatchScorer(model, (score) => scores.push(score), true);
  for (const words of sentences) scorer.add(words);
  expect(scores.length, 'whole groups are scored as they fill').toBeGreaterThan(0);
  scorer.flush();
  expect(scores.length).toBe(sentences.length);
  for (let i = 0; i < sentences.length; i++) {
    const expected = model.scoreSentence(sentences[i]);
    if (scores[i].log10ProbWithUnk !== expected.log10ProbWithUnk || scores[i].tokens.length !== expected.tokens.length) expect(scores[i], `sentence ${i}`).toEqual(expected);
  }
});

test('a vocabulary whose frequent words have thousands of successors (their children sampled every 64 rows): stepBatch and step equal the in-memory model', async () => {
  // 4,000 word types, Zipf-like: the frequent words are followed by hundreds to thousands of others.
  const wide = markovCorpus(64, 6_000, 4_000, 16);
  const wideCounts = countCorpus(wide, 3);
  const model = estimateWith('modified-kneser-ney', wideCounts, []);
  const successors = new Map<number, number>();
  for (const context of model.orders[1].contextRow) successors.set(context, (successors.get(context) ?? 0) + 1);
  const long = [...successors.values()].filter((count) => count >= 256).length;
  expect(long, 'contexts with at least 256 children (SAMPLED_CHILDREN_MIN)').toBeGreaterThan(5);
  expect(Math.max(...successors.values())).toBeGreaterThan(1000);
  const path = join(dir, `m${fileIndex++}.qm`);
  await packModel(model, { fingerprint: '', floatBits: 64 }, nodeFs, path);
  const file = await openModel(path);
  const sentences = idsOf(file, markovCorpus(65, 400, 4_200, 16));
  // step against the in-memory model (src/estimate/model.ts) to 1e-9, along every sentence.
  let compared = 0;
  const state = file.newState();
  for (const sentence of sentences) {
    file.resetState(state);
    const history = [0];
    for (const id of sentence) {
      const expected = logProb(model, history, id);
      const value = file.step(state, id);
      if (!(Math.abs(value - expected.log10Prob) <= 1e-9 * Math.max(1, Math.abs(expected.log10Prob))) || state.order !== expected.order) {
        expect([value, state.order], `after [${history.join(' ')}]`).toEqual([expected.log10Prob, expected.order]);
      }
      history.push(id);
      compared++;
    }
  }
  expect(compared).toBeGreaterThan(3000);
  // stepBatch against step, bit for bit.
  const expected = stepped(file, sentences);
  scoreIdSentences(file, sentences, (sentence, position, log10Prob, order) => {
    if (!Object.is(log10Prob, expected[sentence][position][0]) || order !== expected[sentence][position][1]) expect([log10Prob, order]).toEqual(expected[sentence][position]);
  }, 64);
});

test('BatchScorer scores a model file under SCORE_BATCH_MODEL_BYTES_MIN one sentence at a time (the same numbers)', async () => {
  const model = await packed(3, 'modified-kneser-ney', { floatBits: 32 });
  expect(model.fileBytes).toBeLessThan(SCORE_BATCH_MODEL_BYTES_MIN);
  const scores: ReturnType<PackedModel['scoreSentence']>[] = [];
  const scorer = new BatchScorer(model, (score) => scores.push(score));
  expect(scorer.batched).toBe(false);
  for (const words of text) scorer.add(words);
  expect(scores.length, 'scored as they come').toBe(text.length);
  scorer.flush();
  expect(scores).toEqual(text.map((words) => model.scoreSentence(words)));
});

test('scoresInBatches: batches only for the JavaScript step, from SCORE_BATCH_MODEL_BYTES_MIN (the WebAssembly step beats stepBatch at every size measured)', () => {
  const model = (engine: 'js' | 'wasm', fileBytes: number): PackedModel => ({ engine, fileBytes }) as unknown as PackedModel;
  expect(scoresInBatches(model('js', SCORE_BATCH_MODEL_BYTES_MIN))).toBe(true);
  expect(scoresInBatches(model('js', SCORE_BATCH_MODEL_BYTES_MIN - 1))).toBe(false);
  expect(scoresInBatches(model('wasm', SCORE_BATCH_MODEL_BYTES_MIN))).toBe(false);
  expect(scoresInBatches(model('wasm', 2 ** 32))).toBe(false);
});
