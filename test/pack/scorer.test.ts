/**
 * Perplexity of a packed model (src/score/model-scorer.ts) against `perplexity` of the in-memory
 * model (src/score/perplexity.ts): the same counts and sums, OOVs and literal markers included.
 */
import { join } from 'node:path';
import { afterAll, expect, test } from 'vitest';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { packedPerplexity } from '../../src/score/model-scorer.ts';
import { perplexity } from '../../src/score/perplexity.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { expectClose, temporaryDirectory } from './support.ts';

const { dir, remove } = temporaryDirectory('scorer');
afterAll(remove);

const train = markovCorpus(41, 200, 30, 10);
const counts = countCorpus(train, 3);
const testText = [...markovCorpus(42, 80, 36, 10), [], ['w1', '<unk>', '</s>', '<s>', 'unseen']];

test('packed perplexity equals the in-memory perplexity (float64), every method', async () => {
  for (const method of ['modified-kneser-ney', 'katz', 'witten-bell', 'jelinek-mercer'] as const) {
    const model = estimateWith(method, counts, markovCorpus(43, 40, 30, 10));
    const path = join(dir, `${method}.qm`);
    await packModel(model, { fingerprint: '', floatBits: 64 }, nodeFs, path);
    const expected = perplexity(model, testText);
    const found = packedPerplexity(await openModel(path), testText);
    expect([found.sentences, found.tokens, found.oov]).toEqual([expected.sentences, expected.tokens, expected.oov]);
    expect(found.oov).toBeGreaterThanOrEqual(4);
    for (const key of ['log10Prob', 'log10ProbWithUnk', 'perplexity', 'perplexityWithUnk'] as const) expectClose(found[key], expected[key], 1e-12);
  }
});

test('refuses a model that is not normalised, and a text with no sentence', async () => {
  const path = join(dir, 'stupid.qm');
  await packModel(estimateWith('stupid-backoff', counts, []), { fingerprint: '' }, nodeFs, path);
  const stupid = await openModel(path);
  expect(() => packedPerplexity(stupid, testText)).toThrow(/needs a normalised model; this stupid-backoff model gives scores/);
  const normal = join(dir, 'normal.qm');
  await packModel(estimateWith('kneser-ney', counts, []), { fingerprint: '' }, nodeFs, normal);
  const normalised = await openModel(normal);
  expect(() => packedPerplexity(normalised, [[], []])).toThrow(/nothing to score/);
});
