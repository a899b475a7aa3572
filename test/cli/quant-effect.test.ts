/**
 * `quern info MODEL --heldout TEXT`: the held-out perplexity of the values as stored and, for a file
 * of floats, with the 16- and 8-bit codes `quern pack --quant` would give. Each figure is checked
 * against scoring (`quern score`'s totals) the file itself and files packed with those codes; and
 * against what the trade expects of codebooks fitted to the values (common practice, from memory:
 * 16-bit codes change perplexity by well under 0.1 %, 8-bit ones by a few per cent at most).
 */
import { readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { infoCommand } from '../../src/cli/info.ts';
import { scoreCommand } from '../../src/cli/score.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel, packModelSource } from '../../src/pack/writer.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';
import { runCommandsInProcess } from '../support/in-process.ts';

const { dir, remove } = temporaryDirectory('quant-effect');
afterAll(remove);

const info = async (args: string[]) => JSON.parse(await runCommandsInProcess([infoCommand], ['info', ...args, '--json']));
const scoreTotal = async (model: string, text: string) => JSON.parse(await runCommandsInProcess([scoreCommand], ['score', model, text, '--json', '--quiet'])).total;

describe('quern info --heldout', () => {
  test('float32: perplexity as stored and with 16- and 8-bit codes, each what scoring such a file gives', async () => {
    const model = join(dir, 'model.qm');
    const heldout = join(dir, 'heldout.txt');
    await packModel(estimateWith('modified-kneser-ney', countCorpus(markovCorpus(51, 3000, 80, 12), 3), []), { fingerprint: '' }, nodeFs, model);
    writeFileSync(heldout, markovCorpus(52, 400, 90, 12).map((words) => words.join(' ')).join('\n') + '\n');
    const described = await info([model, '--heldout', heldout]);
    const [stored, sixteen, eight] = described.heldout.variants;
    expect(described.heldout.variants.map((variant: { values: string }) => variant.values)).toEqual(['float32', '16-bit quantised', '8-bit quantised']);
    const total = await scoreTotal(model, heldout);
    expect(described.heldout.tokens).toBe(total.tokens);
    expect(described.heldout.oov).toBe(total.oov);
    expect(described.heldout.oov).toBeGreaterThan(0);
    expect(stored.perplexity).toBe(total.perplexity);
    expect(stored.perplexityWithUnk).toBe(total.perplexityWithUnk);
    // The coded variants: files packed from the model file's values with those codes.
    for (const [bits, variant] of [[16, sixteen], [8, eight]] as const) {
      const coded = join(dir, `coded-${bits}.qm`);
      await packModelSource((await openModel(model)).toModelSource(), { fingerprint: '', quantBits: bits }, nodeFs, coded);
      expect(variant.perplexity).toBe((await scoreTotal(coded, heldout)).perplexity);
    }
    expect(Math.abs(sixteen.perplexity - stored.perplexity) / stored.perplexity).toBeLessThan(1e-3);
    expect(Math.abs(eight.perplexity - stored.perplexity) / stored.perplexity).toBeLessThan(0.03);
    expect(eight.bytesPerNgram).toBeLessThan(stored.bytesPerNgram);
    // The temporary files are gone.
    expect(readdirSync(dir).filter((name) => name.includes('tmp'))).toEqual([]);

    // A file of codes: its perplexity as stored, nothing to compare with.
    const codedInfo = await info([join(dir, 'coded-8.qm'), '--heldout', heldout]);
    expect(codedInfo.heldout.variants).toEqual([{ ...eight, bytesPerNgram: codedInfo.heldout.variants[0].bytesPerNgram }]);
    const text = await runCommandsInProcess([infoCommand], ['info', model, '--heldout', heldout]);
    expect(text).toMatch(/perplexity [\d.]+ with 8-bit codes \([+-][\d.]+ %; [\d.]+ bytes per n-gram\)/);
  });
});
