/**
 * The most probable next tokens (`nextTokens`, `quern next`) against scoring every token of the
 * vocabulary after the same history with `logProb` (which finds the history's rows afresh, not from
 * a state), on float32, 8-bit (many equal values: ties by id) and stupid-backoff models; and, for a
 * normalised model, the whole list's probabilities sum to 1 (a conditional distribution: common
 * practice for any normalised language model).
 */
import { spawn } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { nextCommand } from '../../src/cli/next.ts';
import { BOS_ID } from '../../src/corpus/vocabulary.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel, type PackedModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { contextState, nextTokens, type NextToken } from '../../src/score/next-words.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';
import { runCommandsInProcess } from '../support/in-process.ts';
import { seededRandom } from '../support/seeded.ts';
import { REPO } from '../support/cli.ts';

const { dir, remove } = temporaryDirectory('next-words');
afterAll(remove);

const train = markovCorpus(41, 1500, 60, 12);
const counts = countCorpus(train, 4);
const files = {
  float32: join(dir, 'mkn.qm'),
  eightBit: join(dir, 'mkn8.qm'),
  stupid: join(dir, 'sb.qm'),
};

async function models(): Promise<Record<keyof typeof files, PackedModel>> {
  await packModel(estimateWith('modified-kneser-ney', counts, []), { fingerprint: '' }, nodeFs, files.float32);
  await packModel(estimateWith('modified-kneser-ney', counts, []), { fingerprint: '', quantBits: 8 }, nodeFs, files.eightBit);
  await packModel(estimateWith('stupid-backoff', counts, []), { fingerprint: '' }, nodeFs, files.stupid);
  return { float32: await openModel(files.float32), eightBit: await openModel(files.eightBit), stupid: await openModel(files.stupid) };
}

/** Every token 1..V scored by logProb after `history` (ids), best first, ties by id. */
function bruteForce(model: PackedModel, history: number[], keep: (id: number) => boolean = () => true): NextToken[] {
  const all: NextToken[] = [];
  for (let id = 1; id <= model.vocabularySize; id++) {
    if (!keep(id)) continue;
    const { log10Prob, order } = model.logProb(history, id);
    all.push({ id, word: model.word(id), log10Prob, order });
  }
  return all.sort((a, b) => b.log10Prob - a.log10Prob || a.id - b.id);
}

describe('nextTokens', () => {
  test('the best tokens after many contexts are those of scoring the whole vocabulary, in the same order', async () => {
    const opened = await models();
    // Contexts: none, seen word sequences of 1-3 words, sequences never seen, and OOV words.
    const contexts: string[][] = [[], ['zzz-unseen'], ['zzz-unseen', 'yyy-unseen', 'xxx-unseen']];
    for (const sentence of train.slice(0, 12)) for (let length = 1; length <= Math.min(3, sentence.length); length++) contexts.push(sentence.slice(0, length));
    for (const sentence of train.slice(12, 20)) contexts.push([...sentence.slice(0, 2)].reverse());
    for (const [name, model] of Object.entries(opened)) {
      for (const words of contexts) {
        for (const sentenceStart of [true, false]) {
          const ids = words.map((word) => (model.textWordId(word) < 0 ? model.unkId : model.textWordId(word)));
          const history = sentenceStart ? [BOS_ID, ...ids] : ids;
          const state = contextState(model, words, sentenceStart);
          const expected = bruteForce(model, history);
          for (const top of [1, 5, 40]) {
            expect(nextTokens(model, state, { top }), `${name} after ${sentenceStart ? '<s> ' : ''}${words.join(' ')}, top ${top}`).toEqual(expected.slice(0, top));
          }
        }
      }
    }
  });

  test('a back-off model whose continuations score below a frequent word\'s backed-off score: that word is still found', async () => {
    // After "q" the model has 31 continuations, "the" (the most frequent word) among them; with
    // stupid backoff S(the | q) = 1/31, but "and", never after "q", scores 0.4 · p1(and) ≈ 0.12:
    // the best token comes from the unigram ranking past a word that is a continuation.
    const designed = [
      ...Array.from({ length: 200 }, () => ['the', 'and', 'the', 'and', 'of']),
      ['q', 'the'], ...Array.from({ length: 30 }, (_, i) => ['q', `rare${i}`]),
    ];
    const file = join(dir, 'designed.qm');
    await packModel(estimateWith('stupid-backoff', countCorpus(designed, 2), []), { fingerprint: '' }, nodeFs, file);
    const model = await openModel(file);
    for (const top of [1, 2, 3]) {
      const got = nextTokens(model, contextState(model, ['q']), { top });
      expect(got).toEqual(bruteForce(model, [BOS_ID, model.textWordId('q')]).slice(0, top));
      expect(got[0].word).toBe('and');
    }
  });

  test('a prefix and excluded ids keep only those tokens, still exactly the best of them', async () => {
    const { float32: model, eightBit } = await models();
    const exclude = new Set([model.eosId, model.unkId]);
    for (const m of [model, eightBit]) {
      for (const words of [[], train[3].slice(0, 2), ['zzz-unseen']]) {
        const state = contextState(m, words);
        const history = [BOS_ID, ...words.map((word) => (m.textWordId(word) < 0 ? m.unkId : m.textWordId(word)))];
        for (const prefix of ['w1', 'w', 'w2', 'nothing-starts-so']) {
          const keep = (id: number): boolean => !exclude.has(id) && m.word(id).startsWith(prefix);
          expect(nextTokens(m, state, { top: 7, prefix, exclude })).toEqual(bruteForce(m, history, keep).slice(0, 7));
        }
      }
    }
  });

  test('contexts with thousands of continuations, read ranked and in part: still exactly the best', async () => {
    // "the" and "a" are followed by ~1,500 different words (and "<s>" by ~3,000): past
    // RANKED_CHILDREN_MIN, so their children are read by probability and only as far as needed.
    const random = seededRandom(77);
    const sentences: string[][] = [];
    for (let i = 0; i < 6000; i++) {
      const word = `w${Math.floor(1500 * random() ** 2)}`;
      const next = `w${Math.floor(1500 * random() ** 3)}`;
      sentences.push(i % 3 === 0 ? ['the', word, next] : i % 3 === 1 ? ['a', word, 'the', next] : [word, 'a', next, 'the']);
    }
    // "a", frequent, follows "the" only twice: under stupid backoff its score after "the" is far
    // below what backing off to its unigram would give, so it must not be taken for a word no
    // context continues while the ranked read of "the" stops before it.
    sentences.push(['the', 'a'], ['the', 'a']);
    const wide = countCorpus(sentences, 3);
    const wideFiles = { float32: join(dir, 'wide.qm'), eightBit: join(dir, 'wide8.qm'), stupid: join(dir, 'wide-sb.qm') };
    await packModel(estimateWith('modified-kneser-ney', wide, []), { fingerprint: '' }, nodeFs, wideFiles.float32);
    await packModel(estimateWith('modified-kneser-ney', wide, []), { fingerprint: '', quantBits: 8 }, nodeFs, wideFiles.eightBit);
    await packModel(estimateWith('stupid-backoff', wide, []), { fingerprint: '' }, nodeFs, wideFiles.stupid);
    for (const file of Object.values(wideFiles)) {
      const model = await openModel(file);
      const id = (word: string): number => (model.textWordId(word) < 0 ? model.unkId : model.textWordId(word));
      for (const words of [[], ['the'], ['a'], ['w3', 'the'], ['w1', 'a'], ['a', 'w7'], ['zzz', 'the'], ['the', 'w2', 'the']]) {
        const history = [BOS_ID, ...words.map(id)];
        // Twice: the second time from the kept rankings.
        for (let round = 0; round < 2; round++) {
          for (const top of [1, 5, 60]) {
            expect(nextTokens(model, contextState(model, words), { top })).toEqual(bruteForce(model, history).slice(0, top));
          }
          for (const prefix of ['w1', 'w14', 'w149', 't']) {
            const keep = (token: number): boolean => model.word(token).startsWith(prefix);
            expect(nextTokens(model, contextState(model, words), { top: 8, prefix })).toEqual(bruteForce(model, history, keep).slice(0, 8));
          }
        }
      }
    }
  });

  test('a normalised model: the probabilities of every next token sum to 1', async () => {
    const { float32: model } = await models();
    for (const words of [[], train[0].slice(0, 1), train[5].slice(0, 3), ['zzz-unseen']]) {
      const all = nextTokens(model, contextState(model, words), { top: model.vocabularySize });
      expect(all).toHaveLength(model.vocabularySize);
      // float32 values: each term to ~7 digits.
      expect(all.reduce((sum, token) => sum + 10 ** token.log10Prob, 0)).toBeCloseTo(1, 5);
    }
  });

  test('prefixes of non-ASCII words: the byte comparison (wordStartsWith) agrees with String.startsWith', async () => {
    // Words sharing lead bytes of multi-byte characters (é = c3 a9, è = c3 a8; м and н share d0).
    const words = ['ébène', 'èbe', 'éa', 'e', 'мост', 'нос', 'м', '港口', '港', '渡', 'ab🦀', 'ab'];
    const sentences = Array.from({ length: 40 }, (_, i) => [words[i % words.length], words[(i * 5 + 1) % words.length], words[(i * 7 + 2) % words.length]]);
    const file = join(dir, 'non-ascii.qm');
    await packModel(estimateWith('modified-kneser-ney', countCorpus(sentences, 2), []), { fingerprint: '' }, nodeFs, file);
    const model = await openModel(file);
    const encoder = new TextEncoder();
    for (const prefix of ['', 'é', 'éb', 'è', 'e', 'м', 'мо', 'н', '港', '港口', '港口口', 'ab', 'ab🦀', '<', '</']) {
      for (let id = 0; id <= model.vocabularySize; id++) expect(model.wordStartsWith(id, encoder.encode(prefix))).toBe(model.word(id).startsWith(prefix));
      const keep = (id: number): boolean => model.word(id).startsWith(prefix);
      expect(nextTokens(model, contextState(model, ['мост']), { top: 5, prefix })).toEqual(bruteForce(model, [BOS_ID, model.wordId('мост')], keep).slice(0, 5));
    }
    // A prefix longer than the word: the next word's bytes follow it in the file, and do not count.
    for (let id = 0; id < model.vocabularySize; id++) {
      const prefix = model.word(id) + model.word(id + 1);
      expect(model.wordStartsWith(id, encoder.encode(prefix))).toBe(false);
    }
  });

  test('quern next --queries answers a file of queries, a JSON line each, and a bad line with its error', async () => {
    await models();
    const model = await openModel(files.float32);
    const contexts = [train[3].slice(0, 2), [], train[4].slice(0, 1), ['zzz-unseen', train[5][0]]];
    const queries = Buffer.concat([
      Buffer.from(`${contexts[0].join(' ')}\n\n${contexts[2].join(' ')}\tw\r\n`),
      Buffer.from([0x77, 0xff, 0x0a]),
      Buffer.from(`${contexts[3].join(' ')}\n${contexts[0][0]}\ttwo words\n${contexts[0].join('  ')}`),
    ]);
    const file = join(dir, 'queries.txt');
    writeFileSync(file, queries);
    const printed = await runCommandsInProcess([nextCommand], ['next', files.float32, '--queries', file, '--top', '3']);
    const records = printed.trim().split('\n').map((line) => JSON.parse(line));
    const expected = (words: string[], prefix?: string) => ({
      context: ['<s>', ...words.map((word) => (model.textWordId(word) < 0 ? '<unk>' : word))],
      prefix: prefix ?? null,
      next: nextTokens(model, contextState(model, words), { top: 3, prefix }).map(({ word, log10Prob, order }) => ({ word, log10Prob, probability: 10 ** log10Prob, order })),
    });
    expect(records).toEqual([
      { line: 1, ...expected(contexts[0]) },
      { line: 2, ...expected([]) },
      { line: 3, ...expected(contexts[2], 'w') },
      { line: 4, error: 'invalid UTF-8' },
      { line: 5, ...expected(contexts[3]) },
      { line: 6, error: 'the prefix must be the start of one token; "two words" is 2 tokens' },
      { line: 7, ...expected(contexts[0]) },
    ]);
    await expect(runCommandsInProcess([nextCommand], ['next', files.float32, 'a b', '--queries', file])).rejects.toThrow(/--queries takes the contexts/);
  });

  test('quern next --queries on standard input answers each query before the next is written', async () => {
    await models();
    const model = await openModel(files.float32);
    const child = spawn(process.execPath, [join(REPO, 'bin/quern.js'), 'next', files.float32, '--queries', '-', '--top', '2'], { stdio: ['pipe', 'pipe', 'pipe'] });
    const lines: string[] = [];
    let pending = '';
    let waiting: (() => void) | undefined;
    child.stdout.setEncoding('utf8').on('data', (data: string) => {
      pending += data;
      for (let newline = pending.indexOf('\n'); newline >= 0; newline = pending.indexOf('\n')) {
        lines.push(pending.slice(0, newline));
        pending = pending.slice(newline + 1);
      }
      waiting?.();
    });
    const answerTo = async (query: string, count: number): Promise<Record<string, unknown>> => {
      child.stdin.write(`${query}\n`);
      while (lines.length < count) await new Promise<void>((resolve) => (waiting = resolve));
      return JSON.parse(lines[count - 1]);
    };
    // The second query is written only once the first is answered: the process answers as it reads.
    for (const [index, words] of [train[6].slice(0, 2), train[7].slice(0, 1)].entries()) {
      const record = await answerTo(words.join(' '), index + 1);
      expect(record.next).toEqual(nextTokens(model, contextState(model, words), { top: 2 }).map(({ word, log10Prob, order }) => ({ word, log10Prob, probability: 10 ** log10Prob, order })));
    }
    child.stdin.end();
    const status = await new Promise<number | null>((resolve) => child.on('close', resolve));
    expect(status).toBe(0);
    expect(lines).toHaveLength(2);
  });

  test('quern next prints them, tokenised as the model records; bad options are refused', async () => {
    await models();
    const words = train[2].slice(0, 2);
    const printed = JSON.parse(await runCommandsInProcess([nextCommand], ['next', files.float32, words.join('  '), '--top', '4', '--json']));
    const model = await openModel(files.float32);
    const expected = nextTokens(model, contextState(model, words), { top: 4 });
    expect(printed.context).toEqual(['<s>', ...words]);
    expect(printed.next).toEqual(expected.map(({ word, log10Prob, order }) => ({ word, log10Prob, probability: 10 ** log10Prob, order })));
    const text = await runCommandsInProcess([nextCommand], ['next', files.float32, words.join(' '), '--top', '2', '--prefix', 'w']);
    expect(text.split('\n')[0]).toBe(`after <s> ${words.join(' ')}, starting with "w": log10 p, p, the order that answered`);
    expect(text.trim().split('\n')).toHaveLength(3);
    await expect(runCommandsInProcess([nextCommand], ['next', files.float32, 'a', '--prefix', 'two words'])).rejects.toThrow(/--prefix must be the start of one token/);
    await expect(runCommandsInProcess([nextCommand], ['next', files.float32, 'a', '--top', '0'])).rejects.toThrow(/--top/);
  });
});
