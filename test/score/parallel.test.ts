/**
 * `quern score` in chunks on worker threads that share the model's memory: the same output, byte
 * for byte, whatever the number of workers, and the same sums as the in-memory model scores the
 * text with (perplexity.ts, DESIGN.md's conventions). Also what scoring on threads rests on: a model
 * handed to another thread over SharedArrayBuffers, and results consumed in order.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, describe, expect, test } from 'vitest';
import { scoreCommand } from '../../src/cli/score.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { modelFromShared, openModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { InOrder } from '../../src/score/in-order.ts';
import { BlockScorer } from '../../src/score/token-ids.ts';
import { TokenReader } from '../../src/corpus/read-tokens.ts';
import { makeTokenizer } from '../../src/corpus/tokenize.ts';
import { isBlankLine } from '../../src/corpus/lines.ts';
import { discoverInputs } from '../../src/corpus/discover.ts';
import { readChunk } from '../../src/corpus/read.ts';
import { LINE_BYTES_MAX } from '../../src/limits.ts';
import { planChunks } from '../../src/corpus/plan.ts';
import { perplexity } from '../../src/score/perplexity.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';
import { runCommandsInProcess } from '../support/in-process.ts';

const { dir, remove } = temporaryDirectory('score-parallel');
afterAll(remove);

const score = (args: string[]): Promise<string> => runCommandsInProcess([scoreCommand], ['score', ...args, '--quiet']);

const train = markovCorpus(21, 2000, 40, 12);
const model = estimateWith('modified-kneser-ney', countCorpus(train, 3), []);
const modelFile = join(dir, 'model.qm');
// Held-out text from the same chain, and with words the model has not seen (OOVs).
const plain = markovCorpus(22, 3000, 40, 12);
const wider = markovCorpus(23, 600, 40, 12).map((words, i) => (i % 7 === 0 ? [...words, `unseen${i % 3}`] : words));
const records = markovCorpus(24, 400, 40, 12);
const text = (sentences: string[][]): string => sentences.map((words) => words.join(' ')).join('\n') + '\n';
// JSON Lines: two sentences per record, as two lines of its text field.
const jsonl = (sentences: string[][]): string =>
  Array.from({ length: sentences.length / 2 }, (_, i) => JSON.stringify({ id: i, body: { text: `${sentences[2 * i].join(' ')}\n${sentences[2 * i + 1].join(' ')}` } })).join('\n') + '\n';

const files = { plain: join(dir, 'a-plain.txt'), gzip: join(dir, 'b-wider.txt.gz'), jsonl: join(dir, 'c-records.jsonl') };

describe('quern score on worker threads', () => {
  test('the same output for 1 and 2 workers, and the in-memory model\'s sums, file by file', async () => {
    await packModel(model, { fingerprint: '' }, nodeFs, modelFile);
    writeFileSync(files.plain, text(plain));
    writeFileSync(files.gzip, gzipSync(text(wider)));
    writeFileSync(files.jsonl, jsonl(records));
    const inputs = [files.plain, files.gzip, files.jsonl, '--text-field', 'body.text'];
    // 4 KiB chunks: the plain file (~70 KB) is ~18 of them, the JSON Lines file ~3, the gzip one 1.
    const chunked = ['--chunk-size', '4KiB'];
    const one = await score([modelFile, ...inputs, ...chunked, '--workers', '1', '--json']);
    const two = await score([modelFile, ...inputs, ...chunked, '--workers', '2', '--json']);
    expect(two).toBe(one);
    const result = JSON.parse(one);
    for (const [index, sentences] of [plain, wider, records].entries()) {
      const expected = perplexity(model, sentences);
      const got = result.files[index];
      expect(got.sentences).toBe(expected.sentences);
      expect(got.tokens).toBe(expected.tokens);
      expect(got.oov).toBe(expected.oov);
      // float32 values in the file: agreement to float32 precision.
      expect(Math.abs(got.log10Prob - expected.log10Prob) / Math.abs(expected.log10Prob)).toBeLessThan(1e-6);
      expect(Math.abs(got.log10ProbWithUnk - expected.log10ProbWithUnk) / Math.abs(expected.log10ProbWithUnk)).toBeLessThan(1e-6);
    }
    expect(result.files[1].oov).toBeGreaterThan(0);
    // Chunks do not change what one chunk per file gives, beyond the order of the additions.
    const whole = JSON.parse(await score([modelFile, ...inputs, '--workers', '1', '--json']));
    expect(whole.total.tokens).toBe(result.total.tokens);
    expect(Math.abs(whole.total.log10Prob - result.total.log10Prob)).toBeLessThan(1e-9 * Math.abs(result.total.log10Prob));

    // Per line: the same records in the same order, numbered from 1 in each file across its chunks.
    const lines1 = await score([modelFile, ...inputs, ...chunked, '--workers', '1', '--per-line']);
    const lines2 = await score([modelFile, ...inputs, ...chunked, '--workers', '2', '--per-line']);
    expect(lines2).toBe(lines1);
    const perLine = lines1.trim().split('\n').map((line) => JSON.parse(line));
    // A sentence of plain text each, a document (two sentences) of the JSON Lines file each.
    expect(perLine).toHaveLength(plain.length + wider.length + records.length / 2);
    const ofPlain = perLine.filter((record) => record.file === files.plain);
    expect(ofPlain.map((record) => record.sentence)).toEqual(Array.from({ length: plain.length }, (_, i) => i + 1));
    expect(ofPlain.reduce((sum, record) => sum + record.tokens, 0)).toBe(result.files[0].tokens);
    // A document's record: its line in the file, and the sums of its two sentences' scores.
    const documents = perLine.filter((record) => record.file === files.jsonl);
    const packed = await openModel(modelFile);
    expect(documents.map((record) => record.line)).toEqual(Array.from({ length: records.length / 2 }, (_, i) => i + 1));
    for (const [i, document] of documents.entries()) {
      const [first, second] = [packed.scoreSentence(records[2 * i]), packed.scoreSentence(records[2 * i + 1])];
      expect(document.sentences).toBe(2);
      expect(document.tokens).toBe(first.tokens.length + second.tokens.length);
      expect(document.log10Prob).toBe(first.log10Prob + second.log10Prob);
      expect(document.perplexity).toBe(10 ** (-(first.log10Prob + second.log10Prob) / (document.tokens - document.oov)));
    }
    // Each record is its sentence's score (sentence 1234 of the plain file, at the model's precision).
    const alone = perplexity(model, [plain[1233]]);
    expect(ofPlain[1233].tokens).toBe(alone.tokens);
    expect(ofPlain[1233].log10Prob).toBeCloseTo(alone.log10Prob, 5);
  });

  test('plain text: each sentence\'s record names its line in the file, blank lines and chunks between', async () => {
    const file = join(dir, 'gappy.txt');
    // Every 7th line blank (or white space only), CRLF line ends: ~2,600 sentences over ~18 chunks.
    const lines = plain.map((words, i) => (i % 7 === 3 ? (i % 2 === 0 ? '' : ' \t ') : words.join(' ')));
    writeFileSync(file, lines.join('\r\n') + '\r\n');
    const expectedLines = lines.flatMap((text, i) => (text.trim() === '' ? [] : [i + 1]));
    for (const workers of ['1', '2']) {
      const printed = await score([modelFile, file, '--chunk-size', '4KiB', '--workers', workers, '--per-line']);
      const records = printed.trim().split('\n').map((line) => JSON.parse(line));
      expect(records.map((record) => record.line)).toEqual(expectedLines);
      expect(records.map((record) => record.sentence)).toEqual(expectedLines.map((_, i) => i + 1));
    }
    // Split by characters (lines tokenised as strings, not bytes): the same lines.
    const chars = await score([modelFile, file, '--chunk-size', '4KiB', '--workers', '2', '--per-line', '--split', 'chars']);
    expect(chars.trim().split('\n').map((line) => JSON.parse(line).line)).toEqual(expectedLines);
    // One chunk of ~1.6 MB: read in blocks of 1 MiB, the lines counted on across them.
    const many = markovCorpus(27, 70_000, 40, 12).map((words, i) => (i % 11 === 5 ? '' : words.join(' ')));
    writeFileSync(file, many.join('\n') + '\n');
    const printed = await score([modelFile, file, '--workers', '1', '--per-line']);
    expect(printed.trim().split('\n').map((line) => JSON.parse(line).line)).toEqual(many.flatMap((text, i) => (text === '' ? [] : [i + 1])));
  });

  test('long JSON Lines documents: each one record, across the scorer\'s groups of tokens', async () => {
    // 250 documents of 40 sentences, ~80,000 tokens in one chunk: past the JSON Lines block and
    // the scorer's group (2^16 tokens each), so documents are cut between groups.
    const sentences = markovCorpus(26, 10_000, 40, 12);
    const file = join(dir, 'long.jsonl');
    writeFileSync(file, Array.from({ length: 250 }, (_, d) => JSON.stringify({ body: { text: sentences.slice(40 * d, 40 * d + 40).map((words) => words.join(' ')).join('\n') } })).join('\n') + '\n');
    const printed = await score([modelFile, file, '--text-field', 'body.text', '--per-line', '--workers', '1']);
    const documents = printed.trim().split('\n').map((line) => JSON.parse(line));
    expect(documents).toHaveLength(250);
    const packed = await openModel(modelFile);
    for (const [d, document] of documents.entries()) {
      const scores = sentences.slice(40 * d, 40 * d + 40).map((words) => packed.scoreSentence(words));
      expect(document.line).toBe(d + 1);
      expect(document.sentences).toBe(40);
      expect(document.tokens).toBe(scores.reduce((sum, one) => sum + one.tokens.length, 0));
      expect(document.log10Prob).toBe(scores.reduce((sum, one) => sum + one.log10Prob, 0));
    }
  });

  test('a bad line in a chunk a worker reads: an error naming file and line, or skipped and reported', async () => {
    const bad = join(dir, 'bad.txt');
    const good = join(dir, 'good.txt');
    const lines = text(plain).split('\n');
    const at = 2500; // well inside a later chunk
    writeFileSync(good, [...lines.slice(0, at), ...lines.slice(at)].join('\n'));
    writeFileSync(bad, Buffer.concat([Buffer.from(lines.slice(0, at).join('\n') + '\n'), Buffer.from([0x66, 0xff, 0x66, 0x0a]), Buffer.from(lines.slice(at).join('\n'))]));
    const args = [modelFile, bad, '--chunk-size', '4KiB', '--workers', '2'];
    await expect(score([...args, '--json'])).rejects.toThrow(`${bad}:${at + 1} (byte `);
    const skipped = JSON.parse(await score([...args, '--json', '--skip-bad']));
    const clean = JSON.parse(await score([modelFile, good, '--chunk-size', '4KiB', '--workers', '2', '--json']));
    expect(skipped.files[0].skipped).toBe(1);
    expect(skipped.files[0].firstSkipped.line).toBe(at + 1);
    expect(skipped.total.skipped).toBe(1);
    expect({ ...skipped.total, skipped: 0, file: '' }).toEqual({ ...clean.total, file: '' });
    const printed = await score([...args, '--skip-bad']);
    expect(printed).toMatch(new RegExp(`skipped 1 bad lines or records \\(first: line ${at + 1}, `));
  });

  test('a gzip file is scored in pieces on every worker, as its text scores uncompressed', async () => {
    // The held-out text with blank lines, as plain text and JSON Lines, each also gzipped: the
    // pieces of the decompressed text end where the plain file's chunks end, so the figures are
    // the same, bit for bit, whatever the workers.
    const lines = plain.map((words, i) => (i % 9 === 4 ? '' : words.join(' ')));
    const pairs: Array<[string, string, string[]]> = [
      [join(dir, 'same.txt'), join(dir, 'same.txt.gz'), []],
      [join(dir, 'same.jsonl'), join(dir, 'same.jsonl.gz'), ['--text-field', 'body.text']],
    ];
    writeFileSync(pairs[0][0], lines.join('\n') + '\n');
    writeFileSync(pairs[1][0], jsonl(plain));
    for (const [raw, zipped, extra] of pairs) {
      writeFileSync(zipped, gzipSync(readFileSync(raw)));
      const outputs: string[] = [];
      for (const [file, workers] of [[raw, '1'], [zipped, '2']]) {
        {
          const json = JSON.parse(await score([modelFile, file, ...extra, '--chunk-size', '4KiB', '--workers', workers, '--json']));
          const records = await score([modelFile, file, ...extra, '--chunk-size', '4KiB', '--workers', workers, '--per-line']);
          outputs.push(JSON.stringify({ ...json.files[0], file: '' }) + records.replaceAll(`"file":${JSON.stringify(file)}`, '"file":""'));
        }
      }
      expect(outputs[0]).toContain('"perplexity"');
      for (const output of outputs) expect(output).toBe(outputs[0]);
    }
  });

  test('a gzip file that breaks off or holds a bad line, read in pieces: the error a whole read gives', async () => {
    const lines = text(plain).split('\n');
    const at = 2500;
    const bad = join(dir, 'bad-in-piece.txt.gz');
    writeFileSync(bad, gzipSync(Buffer.concat([Buffer.from(lines.slice(0, at).join('\n') + '\n'), Buffer.from([0x66, 0xff, 0x66, 0x0a]), Buffer.from(lines.slice(at).join('\n'))])));
    for (const workers of ['1', '2']) {
      await expect(score([modelFile, bad, '--chunk-size', '4KiB', '--workers', workers, '--json'])).rejects.toThrow(`${bad}:${at + 1} (byte `);
      const skipped = JSON.parse(await score([modelFile, bad, '--chunk-size', '4KiB', '--workers', workers, '--json', '--skip-bad']));
      expect(skipped.files[0].firstSkipped.line).toBe(at + 1);
      expect(skipped.files[0].sentences).toBe(plain.length);
    }
    // Cut in half: the message of readChunk for the whole file, for any number of workers.
    const whole = gzipSync(text(plain));
    const cut = join(dir, 'cut.txt.gz');
    writeFileSync(cut, whole.subarray(0, whole.length >> 1));
    const file = (await discoverInputs([cut]))[0];
    const expected = (await readChunk(file, { index: 0, fileIndex: 0, byteStart: 0, byteEnd: file.bytes }, { format: 'text', textField: undefined, skipBad: false }, () => undefined).catch((e) => e)) as Error;
    expect(expected.message).toMatch(/truncated or corrupt gzip data/);
    for (const workers of ['1', '2']) {
      await expect(score([modelFile, cut, '--chunk-size', '4KiB', '--workers', workers])).rejects.toThrow(expected.message);
      await expect(score([modelFile, cut, '--chunk-size', '4KiB', '--workers', workers, '--skip-bad'])).rejects.toThrow(expected.message);
    }
  });

  test('an overlong line in a gzip file read in pieces: rejected, or skipped as one line, as in the text itself', async () => {
    // Longer than LINE_BYTES_MAX: the piece that holds its start ends inside it.
    const lines = text(plain.slice(0, 300)).split('\n');
    const long = 'q'.repeat(LINE_BYTES_MAX + 5);
    const raw = join(dir, 'overlong.txt');
    writeFileSync(raw, [...lines.slice(0, 100), long, ...lines.slice(100)].join('\n'));
    const zipped = join(dir, 'overlong.txt.gz');
    writeFileSync(zipped, gzipSync(readFileSync(raw), { level: 1 }));
    await expect(score([modelFile, zipped, '--chunk-size', '4KiB', '--workers', '2'])).rejects.toThrow(`${zipped}:101 (byte `);
    const results: unknown[] = [];
    for (const [file, workers] of [[raw, '1'], [zipped, '1'], [zipped, '2']]) {
      const result = JSON.parse(await score([modelFile, file, '--chunk-size', '4KiB', '--workers', workers, '--json', '--skip-bad']));
      expect(result.files[0]).toMatchObject({ skipped: 1, sentences: 300, firstSkipped: { line: 101, reason: `line longer than ${LINE_BYTES_MAX} bytes` } });
      results.push({ ...result.files[0], file: '' });
    }
    expect(results[1]).toEqual(results[0]);
    expect(results[2]).toEqual(results[0]);
  });

  test('--format jsonl reads a JSON Lines file whatever its name', async () => {
    const named = join(dir, 'records-as.txt');
    writeFileSync(named, jsonl(records));
    const byName = JSON.parse(await score([modelFile, files.jsonl, '--text-field', 'body.text', '--json', '--workers', '1']));
    const byOption = JSON.parse(await score([modelFile, named, '--format', 'jsonl', '--text-field', 'body.text', '--json', '--workers', '1']));
    expect(byOption.total).toEqual(byName.total);
    expect(byOption.total.sentences).toBe(records.length);
  });
});

describe('a model shared with other threads', () => {
  test('opened { shared: true }, it answers as the file does from the same memory; opened without, it cannot be shared', async () => {
    const shared = await openModel(modelFile, { shared: true });
    const handed = shared.shareable();
    expect(handed.data.every(({ buffer }) => buffer instanceof SharedArrayBuffer)).toBe(true);
    // structuredClone is what postMessage does: the SharedArrayBuffers are shared, not copied.
    const other = modelFromShared(structuredClone(handed));
    for (const sentence of plain.slice(0, 50)) expect(other.scoreSentence(sentence)).toEqual(shared.scoreSentence(sentence));
    expect(other.ngrams).toEqual(shared.ngrams);
    const plainOpen = await openModel(modelFile);
    expect(() => plainOpen.shareable()).toThrow(/opened without \{ shared: true \}/);
  });
});

describe('InOrder', () => {
  test('results offered in any order are consumed in index order; each offer settles once its result is consumed', async () => {
    const consumed: number[] = [];
    const inOrder = new InOrder<number>(async (value) => {
      await new Promise((resolve) => setTimeout(resolve, value % 3));
      consumed.push(value);
    });
    const settled: number[] = [];
    const offers = [3, 1, 4, 0, 2, 6, 5].map((index) => inOrder.offer(index, index * 10).then(() => settled.push(index)));
    await Promise.all(offers);
    expect(consumed).toEqual([0, 10, 20, 30, 40, 50, 60]);
    expect(settled).toEqual([0, 1, 2, 3, 4, 5, 6]);
    expect(inOrder.consumed).toBe(7);
  });

  test('after a failed consume, later offers fail with it and are not consumed', async () => {
    const consumed: number[] = [];
    const inOrder = new InOrder<number>((value) => {
      if (value === 1) throw new Error('disk full');
      consumed.push(value);
    });
    const second = inOrder.offer(2, 2);
    const failing = inOrder.offer(1, 1);
    await inOrder.offer(0, 0);
    await expect(failing).rejects.toThrow('disk full');
    await expect(second).rejects.toThrow('disk full');
    expect(consumed).toEqual([0]);
    expect(() => inOrder.offer(2, 2)).toThrow(/offered once/);
  });
});

describe('tokens looked up from their bytes (BlockScorer over TokenReader)', () => {
  // Words the model knows and does not, non-ASCII ones, separators the tokenizer splits at (NBSP,
  // U+3000, tabs), `<s>`/`</s>`/`<unk>` written in the text (OOVs), blank lines, CRLF, a BOM.
  const known = plain.slice(0, 300).map((words) => words.join(' '));
  const odd = [
    `${known[0]}\u00a0Zürich ${known[1]}`, '', '   ', `<unk> ${known[2]} </s>`, `<s>\t${known[3]}\u3000naïve`, `${known[4].toUpperCase()}\r`,
    'ÉCOLE école Ecole', `${known[5]}   ${known[6]}`,
  ];
  const lines = ['\ufeff' + known[7], ...odd, ...known.slice(8)];
  const file = join(dir, 'odd.txt');

  test.each([
    ['as written', { lowercase: false, unicode: 'none', split: 'space' }],
    ['lower-cased, NFC', { lowercase: true, unicode: 'nfc', split: 'space' }],
    ['characters', { lowercase: false, unicode: 'none', split: 'chars' }],
  ] as const)('%s: every sentence scores exactly as scoreSentence scores its tokens, one at a time and batched', async (_name, normalize) => {
    writeFileSync(file, lines.join('\n') + '\n');
    const packed = await openModel(modelFile);
    const tokenize = makeTokenizer(normalize);
    const expected = lines.map((line) => line.replace(/^\ufeff/, '').replace(/\r$/, '')).filter((line) => !isBlankLine(line)).map((line) => {
      const tokens: string[] = [];
      const n = tokenize(line, tokens);
      return packed.scoreSentence(tokens.slice(0, n));
    });
    for (const batched of [false, true]) {
      const got: Array<[number, number, number, number]> = [];
      const scorer = new BlockScorer(packed, (...figures) => got.push(figures), batched);
      const reader = new TokenReader(normalize, packed, false);
      const [input] = await discoverInputs([file]);
      const [chunk] = await planChunks([input], 1 << 30);
      await reader.read(input, chunk, { format: 'text', textField: undefined, skipBad: false }, (block) => scorer.add(block));
      scorer.flush();
      expect(scorer.batched).toBe(batched);
      expect(got).toEqual(expected.map((score) => [score.tokens.length, score.oov, score.log10Prob, score.log10ProbWithUnk]));
    }
    expect(expected.some((score) => score.oov > 0)).toBe(true);
  });
});
