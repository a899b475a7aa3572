/**
 * The ARPA back-off text format: value formatting, a round trip model → ARPA → model that keeps the
 * scores to the printed precision, a hand-written file read and scored by hand, packing a model read
 * from ARPA, and the errors of a bad file.
 */
import { createWriteStream, readFileSync, writeFileSync } from 'node:fs';
import { once } from 'node:events';
import { join } from 'node:path';
import { afterAll, describe, expect, test, vi } from 'vitest';
import { packCommand } from '../../src/cli/pack.ts';
import { runCommandsInProcess } from '../support/in-process.ts';
import { QuernError } from '../../src/errors.ts';
import { countCorpus, sentenceIds, wordIdMap } from '../../src/estimate/counts.ts';
import { logProb, type LanguageModel } from '../../src/estimate/model.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { formatLog10, log10ValueOfBytes, readArpa, writeArpa, writeArpaFile, type ArpaModelDescription } from '../../src/pack/arpa.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { compareAlongSentences, expectClose, temporaryDirectory } from './support.ts';
import { seededRandom } from '../support/seeded.ts';
import { Log10Texts } from '../../src/pack/arpa-text.ts';

const { dir, remove } = temporaryDirectory('arpa');
afterAll(remove);
let fileIndex = 0;

async function toArpa(model: LanguageModel): Promise<string> {
  const path = join(dir, `model-${fileIndex++}.arpa`);
  const out = createWriteStream(path);
  await writeArpa(model, out);
  out.end();
  await once(out, 'finish');
  return path;
}

function arpaFile(text: string): string {
  const path = join(dir, `hand-${fileIndex++}.arpa`);
  writeFileSync(path, text);
  return path;
}

/** The model with every value rounded as the ARPA writer prints it. */
function rounded(model: LanguageModel): LanguageModel {
  const round = (values: Float64Array): Float64Array => values.map((value) => (value === -Infinity ? value : Number(formatLog10(value))));
  return { ...model, orders: model.orders.map((table) => ({ ...table, log10Prob: round(table.log10Prob), log10BackOff: round(table.log10BackOff) })) };
}

test('values: 7 significant digits in plain decimal notation; −∞ as −99 (common practice)', () => {
  expect(formatLog10(-Infinity)).toBe('-99');
  expect(formatLog10(-2)).toBe('-2');
  expect(formatLog10(0)).toBe('0');
  expect(formatLog10(-0)).toBe('0');
  expect(formatLog10(-0.30103)).toBe('-0.30103');
  expect(formatLog10(-1.23456789)).toBe('-1.234568');
  expect(formatLog10(-12.3456789)).toBe('-12.34568');
  expect(formatLog10(-1.234567891e-8)).toBe('-0.00000001234568');
  expect(formatLog10(0.000123456789)).toBe('0.0001234568');
  expect(formatLog10(Math.log10(0.4))).toBe('-0.39794');
});

test('the writer\'s cache of formatted values gives formatLog10\'s text for every value, through collisions and repeats', () => {
  const random = seededRandom(35);
  const texts = new Log10Texts();
  const values = [0, -0, -Infinity, -99, -1e-30, -123.456];
  for (let i = 0; i < 100_000; i++) values.push(-random() * 10 ** (Math.floor(random() * 8) - 4), values[Math.floor(random() * values.length)]);
  for (const value of values) expect(texts.of(value)).toBe(formatLog10(value));
});

test('values read from bytes are the doubles Number gives for their text (random decimals, and the odd forms the text path takes)', () => {
  const random = seededRandom(34);
  const textValue = (text: string): number => {
    if (text === '-inf' || text === '-Infinity') return -Infinity;
    const value = Number(text);
    if (!Number.isFinite(value)) return NaN;
    return value <= -99 ? -Infinity : value;
  };
  const texts = ['-0', '0', '-0.0', '1.', '.5', '-.5', '+2.25', '-99', '-99.0000001', '-98.9999999', '-100', '-inf', '-Infinity', 'Infinity', 'nan',
    '.', '-', '1e-5', '-1.5E3', '0x10', '1..2', '123456789012345', '1234567890123456', '0.0000000000000000000001', '0.00000000000000000000001',
    '-0.00000001234568', '-1.234568', '-12.34568', '0.0001234568', '00012.50', '1_0'];
  for (let i = 0; i < 20_000; i++) {
    const intDigits = Math.floor(random() * 4);
    const fracDigits = Math.floor(random() * 20);
    let text = random() < 0.7 ? '-' : '';
    for (let d = 0; d < intDigits; d++) text += String(Math.floor(random() * 10));
    if (fracDigits > 0 || intDigits === 0) text += '.';
    for (let d = 0; d < fracDigits; d++) text += String(random() < 0.3 ? 0 : Math.floor(random() * 10));
    texts.push(text);
    texts.push(formatLog10(-random() * 10 ** (Math.floor(random() * 12) - 9)));
  }
  for (const text of texts) {
    const bytes = Buffer.from(`  ${text}\t`, 'latin1');
    expect(Object.is(log10ValueOfBytes(bytes, 2, 2 + text.length), textValue(text)), text).toBe(true);
  }
});

const train = markovCorpus(31, 250, 35, 12);
const heldOut = markovCorpus(32, 50, 35, 12);
const counts = countCorpus(train, 3);
const idOf = wordIdMap(counts.vocabulary);
const testIds = markovCorpus(33, 60, 40, 12).map((words) => sentenceIds(idOf, counts.vocabulary, words).ids);

describe('round trip model → ARPA → model', () => {
  for (const [method, cutoffs] of [['modified-kneser-ney', undefined], ['katz', [1, 2, 2]], ['jelinek-mercer', undefined], ['stupid-backoff', undefined]] as const) {
    test(`${method}${cutoffs ? ' with cutoffs' : ''}: same ids and description; every value within 5e-7 of itself; scores equal those of the values as printed`, async () => {
      const model = estimateWith(method, counts, heldOut, cutoffs as number[] | undefined);
      const back = await readArpa(await toArpa(model));
      expect(back.vocabulary).toEqual({ words: model.vocabulary.words, eosId: model.vocabulary.eosId, unkId: model.vocabulary.unkId });
      expect(back.parameters).toEqual(model.parameters);
      expect([back.normalised, back.cutoffs, back.vocabularyCap, back.log10UnseenContextWeight]).toEqual([model.normalised, model.cutoffs, model.vocabularyCap, model.log10UnseenContextWeight]);
      const print = rounded(model);
      back.orders.forEach((table, index) => {
        const original = model.orders[index];
        expect(table.ids).toEqual(original.ids);
        expect(table.contextRow).toEqual(original.contextRow);
        table.log10Prob.forEach((value, row) => expectClose(value, original.log10Prob[row], 5e-7));
        expect(table.log10Prob).toEqual(print.orders[index].log10Prob);
        // Back-off weights are written for contexts only; the others read back as 0.
        const isContext = new Uint8Array(table.log10Prob.length);
        if (index + 1 < model.order) for (const row of model.orders[index + 1].contextRow) isContext[row] = 1;
        table.log10BackOff.forEach((value, row) => {
          if (isContext[row] === 1) expect(value).toBe(print.orders[index].log10BackOff[row]);
          else expect(value).toBe(0);
        });
      });
      // Scores: exactly those of the printed values, and within the printed precision of the originals.
      for (const sentence of testIds) {
        const wrapped = [0, ...sentence, model.vocabulary.eosId];
        for (let i = 1; i < wrapped.length; i++) {
          const history = wrapped.slice(0, i);
          const score = logProb(back, history, wrapped[i]).log10Prob;
          expect(score).toBe(logProb(print, history, wrapped[i]).log10Prob);
          expectClose(score, logProb(model, history, wrapped[i]).log10Prob, 2e-6);
        }
      }
    });
  }

  test('the file: \\data\\ counts, sections in order, <s> at −99 with its back-off weight, \\end\\', async () => {
    const model = estimateWith('witten-bell', counts, heldOut);
    const text = readFileSync(await toArpa(model), 'utf8');
    const lines = text.split('\n');
    const data = lines.indexOf('\\data\\');
    expect(lines[data - 2]).toMatch(/^quern-model \{"normalised":true,/);
    expect(lines.slice(data + 1, data + 4)).toEqual(model.orders.map((table) => `ngram ${table.order}=${table.log10Prob.length}`));
    const unigrams = lines.indexOf('\\1-grams:');
    expect(lines[unigrams + 1]).toBe(`-99\t<s>\t${formatLog10(model.orders[0].log10BackOff[0])}`);
    expect(lines.indexOf('\\2-grams:')).toBeGreaterThan(unigrams);
    expect(lines.indexOf('\\3-grams:')).toBeGreaterThan(lines.indexOf('\\2-grams:'));
    expect(text.endsWith('\n\\end\\\n')).toBe(true);
    const trigram = lines[lines.indexOf('\\3-grams:') + 1].split('\t');
    expect(trigram).toHaveLength(2);
    expect(trigram[1].split(' ')).toHaveLength(3);
  });

  test('a packed model exported as a stream (toModelSource, as quern export does) gives the text of the model in memory, with and without cutoffs, floats and codes', async () => {
    for (const [method, cutoffs, options] of [
      ['modified-kneser-ney', undefined, { floatBits: 64 }], ['katz', [1, 2, 2], { floatBits: 32 }], ['witten-bell', [1, 1, 2], { quantBits: 8 }],
    ] as const) {
      const model = estimateWith(method, counts, heldOut, cutoffs as number[] | undefined);
      const packedPath = join(dir, `export-${fileIndex++}.qm`);
      await packModel(model, { fingerprint: '', ...options }, nodeFs, packedPath);
      const packed = await openModel(packedPath);
      const inMemory = join(dir, `export-${fileIndex++}.arpa`);
      const streamed = join(dir, `export-${fileIndex++}.arpa`);
      await writeArpaFile(packed.toLanguageModel(), nodeFs, inMemory);
      await writeArpaFile(packed.toModelSource(), nodeFs, streamed);
      expect(readFileSync(streamed, 'utf8')).toBe(readFileSync(inMemory, 'utf8'));
      // A pass over an order yields its rows with their ids, in row order.
      const source = packed.toModelSource();
      const table = packed.toLanguageModel().orders[2];
      const ids: number[] = [];
      for await (const batch of source.rows(3)) ids.push(...batch.ids);
      expect(ids).toEqual([...table.ids]);
    }
  });

  test('a model read from ARPA packs, and the packed file answers as the model read', async () => {
    const model = estimateWith('modified-kneser-ney', counts, heldOut);
    const back = await readArpa(await toArpa(model));
    const packedPath = join(dir, 'from-arpa.qm');
    await packModel(back, { fingerprint: 'from ARPA', floatBits: 64 }, nodeFs, packedPath);
    const packed = await openModel(packedPath);
    expect(compareAlongSentences(back, packed, testIds, 1e-9)).toBeGreaterThan(300);
  });

  test('a word with white space cannot be written', async () => {
    const model = estimateWith('witten-bell', countCorpus([['a b', 'c']], 2), []);
    await expect(toArpa(model)).rejects.toThrow(/"a b" is empty or contains white space/);
  });
});

const HAND = `Some tool's notes: ignored.
\\data\\
ngram 1=4
ngram 2=3

\\1-grams:
-1.0\t</s>
-99\t<s>\t-0.5
-0.6\ta\t-0.2
-0.8   b

\\2-grams:
-0.3\t<s> a
-0.4\ta b
-0.25\ta </s>

\\end\\
`;

const DESCRIPTION: ArpaModelDescription = { normalised: true, log10UnseenContextWeight: 0, parameters: { method: 'witten-bell' }, cutoffs: [1, 1], vocabularyCap: null };

describe('an ARPA file Quern did not write', () => {
  test('needs a description; then reads with <s> = 0, <unk> added with probability 0, and scores as worked out by hand', async () => {
    const path = arpaFile(HAND);
    await expect(readArpa(path)).rejects.toThrow(/no quern-model line says how this model was estimated/);
    const model = await readArpa(path, { description: DESCRIPTION });
    expect(model.vocabulary.words).toEqual(['<s>', '</s>', 'a', 'b', '<unk>']);
    const [bos, eos, a, b, unk] = [0, 1, 2, 3, 4];
    const cases: Array<[number[], number, number, number]> = [
      [[bos], a, -0.3, 2], // <s> a is stored
      [[bos], b, -0.5 + -0.8, 1], // bow(<s>) + p(b)
      [[bos, a], b, -0.4, 2], // the history is the last N−1 = 1 token: a b is stored
      [[a], eos, -0.25, 2],
      [[b], a, -0.6, 1], // b is no context: backs off entirely
      [[b], eos, -1.0, 1],
      [[a], a, -0.2 + -0.6, 1],
      [[a], unk, -Infinity, 1],
    ];
    for (const [history, word, expected, order] of cases) {
      const result = logProb(model, history, word);
      expectClose(result.log10Prob, expected, 1e-12);
      expect(result.order).toBe(order);
    }
    // "a b": p(a|<s>) + p(b|a) + p(</s>|b) = −0.3 − 0.4 − 1.0.
    const packedPath = join(dir, 'hand.qm');
    await packModel(model, { fingerprint: '', floatBits: 64 }, nodeFs, packedPath);
    expectClose((await openModel(packedPath)).scoreSentence(['a', 'b']).log10Prob, -1.7, 1e-12);
  });

  test('imported: without a description, read as what the format says (method imported, probabilities, no cutoffs); quern pack does so and says it', async () => {
    const path = arpaFile(HAND);
    const model = await readArpa(path, { imported: true });
    expect(model.parameters).toEqual({ method: 'imported' });
    expect([model.normalised, model.log10UnseenContextWeight, model.cutoffs, model.vocabularyCap]).toEqual([true, 0, [1, 1], null]);
    // A description, given or in the file, wins.
    expect((await readArpa(path, { imported: true, description: DESCRIPTION })).parameters).toEqual({ method: 'witten-bell' });
    const packed = join(dir, 'imported.qm');
    const notes: string[] = [];
    vi.spyOn(process.stderr, 'write').mockImplementation((chunk: string | Uint8Array) => {
      notes.push(String(chunk));
      return true;
    });
    try {
      expect(await runCommandsInProcess([packCommand], ['pack', path, '--out', packed])).toMatch(/^packed .*imported\.qm: order 2, n-grams 5 \+ 3/);
    } finally {
      vi.restoreAllMocks();
    }
    expect(notes.join('')).toMatch(/does not say how it was estimated \(no quern-model line\): packed as .* method "imported"/);
    const opened = await openModel(packed);
    expect(opened.parameters).toEqual({ method: 'imported' });
    // "a b": p(a|<s>) + p(b|a) + p(</s>|b) = −0.3 − 0.4 − 1.0, as in the test above.
    expectClose(opened.scoreSentence(['a', 'b']).log10Prob, -1.7, 1e-6);
  });

  test('white space, line ends, a byte-order mark and -inf do not change what is read; words may be any UTF-8 (n-gram lines are read from their bytes, the rest as text)', async () => {
    const canonical = [
      '\\data\\', 'ngram 1=5', 'ngram 2=4', 'ngram 3=2', '',
      '\\1-grams:', '-1.0\t</s>', '-99\t<s>\t-0.5', '-0.6\tcafé\t-0.2', '-0.7\t日本\t-0.1', '-0.8\tb', '',
      '\\2-grams:', '-0.3\t<s> café\t-0.05', '-0.4\tcafé 日本\t-0.07', '-0.25\t日本 </s>', '-0.5\tcafé b', '',
      '\\3-grams:', '-99\t<s> café 日本', '-0.1\tcafé 日本 </s>', '', '\\end\\', '',
    ].join('\n');
    const odd = '\ufeff' + [
      '\\data\\', 'ngram 1=5', 'ngram 2=4', 'ngram 3=2', '',
      '\\1-grams:', '-1.0 </s>', '-99\t<s>  -0.5', '-0.6\tcafé\t-0.2 ', '  -0.7 日本 -0.1', '-0.8\tb', '   ',
      '\\2-grams:', '-0.30   <s>\tcafé\t-0.05', ' -0.4 café 日本 -0.07\t', '-0.25\u00a0日本 </s>', '-0.5\tcafé\u3000b', '',
      '\\3-grams:', '-inf <s> café\t日本', '-0.1\tcafé 日本 </s>\u00a0', '', '\\end\\', '',
    ].join('\r\n');
    const description = { ...DESCRIPTION, cutoffs: [1, 1, 1] };
    const expected = await readArpa(arpaFile(canonical), { description });
    expect(expected.vocabulary.words).toEqual(['<s>', '</s>', 'café', '日本', 'b', '<unk>']);
    expect(expected.orders[2].log10Prob[0]).toBe(-Infinity);
    expectClose(logProb(expected, [2, 3], 1).log10Prob, -0.1, 1e-12);
    expect(await readArpa(arpaFile(odd), { description })).toEqual(expected);
    // Written back (the words from their UTF-8 bytes) and read again: the same model.
    const written = await toArpa(expected);
    expect(readFileSync(written, 'utf8')).toContain('\n-0.4\tcafé 日本\t-0.07\n');
    expect(await readArpa(written)).toEqual(expected);
  });

  test('bad files: a QuernError naming the file and line', async () => {
    const cases: Array<[string, RegExp]> = [
      ['no data here\n', /:1: no \\data\\ line: not an ARPA file/],
      [HAND.replace('ngram 2=3', 'ngram 2=4'), /:17: order 2 has 3 n-grams; \\data\\ declares 4/],
      [HAND.replace('ngram 2=3', 'ngram 3=3'), /:4: expected "ngram 2=…", found order 3/],
      [HAND.replace('-0.4\ta b', '-0.4\ta c'), /:14: the word "c" is not among the unigrams/],
      [HAND.replace('-0.25\ta </s>', '-0.25\ta </s>\t-0.1'), /:15: a back-off weight at the highest order 2/],
      [HAND.replace('-0.25\ta </s>', '-0.25\ta <s>'), /:15: <s> is a context only/],
      [HAND.replace('-0.25\ta </s>', '-0.4\ta b'), /:15: the n-gram "a b" appears twice/],
      [HAND.replace('-0.6\ta', 'x\ta'), /:9: the log10 probability "x" is not a number/],
      [HAND.replace('-1.0\t</s>\n', '').replace('ngram 1=4', 'ngram 1=3'), /:11: the unigrams lack <\/s>/],
      [HAND.replace('\\end\\\n', ''), /the file ends before \\end\\/],
      [HAND + 'more\n', /:18: text after \\end\\/],
      [HAND.replace('ngram 2=3', 'ngram 2=3000000'), /:4: 3000000 n-grams of order 2 cannot fit in a file of \d+ bytes/],
      [HAND.replace('-0.3\t<s> a', '-0.3\t<s>'), /:13: an entry of order 2 has a log10 probability, 2 words and an optional back-off weight \(found 2 fields\)/],
    ];
    const trigrams = HAND.replace('ngram 2=3\n', 'ngram 2=3\nngram 3=1\n').replace('\n\\end\\', '\n\\3-grams:\n-0.1\tb a </s>\n\n\\end\\');
    cases.push([trigrams, /:19: the n-gram "b a <\/s>" has no \(n−1\)-gram "b a" for its context/]);
    for (const [text, pattern] of cases) {
      const path = arpaFile(text);
      const description = text === trigrams ? { ...DESCRIPTION, cutoffs: [1, 1, 1] } : DESCRIPTION;
      const error = await readArpa(path, { description }).catch((caught: unknown) => caught);
      expect(error, pattern.source).toBeInstanceOf(QuernError);
      expect((error as QuernError).code).toBe('input');
      expect((error as Error).message.startsWith(path)).toBe(true);
      expect((error as Error).message).toMatch(pattern);
    }
    const invalid = join(dir, 'invalid.arpa');
    writeFileSync(invalid, Buffer.concat([Buffer.from(HAND.slice(0, 40)), Buffer.from([0xff, 0xfe, 0x0a]), Buffer.from(HAND.slice(40))]));
    await expect(readArpa(invalid, { description: DESCRIPTION })).rejects.toThrow(/:3: not valid UTF-8/);
    await expect(readArpa(join(dir, 'missing.arpa'))).rejects.toMatchObject({ code: 'io' });
  });
});
