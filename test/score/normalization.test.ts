/**
 * The text normalisation travels with the model: the estimate records the count's options in the
 * model file, an ARPA export and re-pack keep them, and `quern score` applies them unless told
 * otherwise — and refuses options that contradict them (text normalised unlike the training text
 * turns known words into OOVs; that scoring must use the training normalisation is common practice).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, afterEach, describe, expect, test, vi } from 'vitest';
import { scoreCommand } from '../../src/cli/score.ts';
import type { NormalizeOptions } from '../../src/corpus/types.ts';
import { QuernError } from '../../src/errors.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { readArpa, writeArpaFile } from '../../src/pack/arpa.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { resolveNormalize } from '../../src/score/normalization.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';
import { runCommandsInProcess } from '../support/in-process.ts';

const { dir, remove } = temporaryDirectory('normalize');
afterAll(remove);
afterEach(() => vi.restoreAllMocks());

const LOWER_NFC: NormalizeOptions = { lowercase: true, unicode: 'nfc', split: 'space' };

describe('resolveNormalize', () => {
  test('a model that records its normalisation: untyped options take the recorded values', () => {
    expect(resolveNormalize(LOWER_NFC, {})).toEqual({ normalize: LOWER_NFC, source: 'model' });
    expect(resolveNormalize(LOWER_NFC, { lowercase: true, unicode: 'nfc' })).toEqual({ normalize: LOWER_NFC, source: 'model' });
  });

  test('a typed option that contradicts the record is refused, naming both values', () => {
    const error = (() => { try { resolveNormalize(LOWER_NFC, { lowercase: false, split: 'chars' }); } catch (caught) { return caught; } })();
    expect(error).toBeInstanceOf(QuernError);
    expect((error as QuernError).code).toBe('config');
    expect((error as Error).message).toMatch(/--lowercase false \(the model was trained with true\); --split chars \(the model was trained with space\)/);
  });

  test('a model that records none: the typed options over the count\'s defaults', () => {
    expect(resolveNormalize(null, {})).toEqual({ normalize: { lowercase: false, unicode: 'none', split: 'space' }, source: 'options' });
    expect(resolveNormalize(null, { lowercase: true })).toEqual({ normalize: { lowercase: true, unicode: 'none', split: 'space' }, source: 'options' });
  });
});

/** Runs `quern score` in-process and returns what it printed. */
const score = (args: string[]): Promise<string> => runCommandsInProcess([scoreCommand], ['score', ...args]);

describe('the model file carries the normalisation to score', () => {
  const train = markovCorpus(7, 200, 30, 9);
  const model = estimateWith('modified-kneser-ney', countCorpus(train, 3), []);
  // The held-out text in capitals: only lower-casing makes its words known.
  const text = markovCorpus(8, 40, 30, 9).map((words) => words.join(' ').toUpperCase()).join('\n') + '\n';

  test('recorded by pack, kept through ARPA and back, absent when not given', async () => {
    const recorded = join(dir, 'recorded.qm');
    await packModel(model, { fingerprint: '', normalize: LOWER_NFC }, nodeFs, recorded);
    expect((await openModel(recorded)).normalize).toEqual(LOWER_NFC);

    const arpa = join(dir, 'recorded.arpa');
    await writeArpaFile((await openModel(recorded)).toLanguageModel(), nodeFs, arpa);
    const back = await readArpa(arpa);
    expect(back.normalize).toEqual(LOWER_NFC);
    const repacked = join(dir, 'repacked.qm');
    await packModel(back, { fingerprint: '' }, nodeFs, repacked);
    expect((await openModel(repacked)).normalize).toEqual(LOWER_NFC);

    const plain = join(dir, 'plain.qm');
    await packModel(model, { fingerprint: '' }, nodeFs, plain);
    expect((await openModel(plain)).normalize).toBeNull();
  });

  test('score lower-cases as recorded; the same text without the record has every word OOV', async () => {
    const recorded = join(dir, 'score-recorded.qm');
    const plain = join(dir, 'score-plain.qm');
    await packModel(model, { fingerprint: '', normalize: { lowercase: true, unicode: 'none', split: 'space' } }, nodeFs, recorded);
    await packModel(model, { fingerprint: '' }, nodeFs, plain);
    const heldout = join(dir, 'heldout.txt');
    writeFileSync(heldout, text);
    const words = text.split(/\s+/).filter((w) => w !== '').length;

    const fromRecord = JSON.parse(await score([recorded, heldout, '--json']));
    expect(fromRecord.normalizeSource).toBe('model');
    expect(fromRecord.total.oov).toBeLessThan(words / 10);
    // The same numbers as typing the option for a model that records none.
    const typed = JSON.parse(await score([plain, heldout, '--json', '--lowercase']));
    expect(typed.normalizeSource).toBe('options');
    expect(typed.total).toEqual(fromRecord.total);
    // Without it, every word of the capitalised text is unknown.
    const untyped = JSON.parse(await score([plain, heldout, '--json']));
    expect(untyped.total.oov).toBe(words);

    await expect(score([recorded, heldout, '--no-lowercase'])).rejects.toMatchObject({ code: 'config', message: expect.stringMatching(/--lowercase false \(the model was trained with true\)/) });
  });
});
