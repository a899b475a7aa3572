/**
 * `quern score MODEL -`: standard input piped into the real CLI scores exactly as the same text in
 * a file (per-file sums, totals, per-line records and their lines, bad lines skipped), plain, gzip
 * (known by its first bytes) or JSON Lines (--format jsonl), on one thread or two; its errors name
 * `-`, the line and the cause; an empty input is no sentence; `-` twice is refused.
 */
import { spawn } from 'node:child_process';
import { copyFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { scoreCommand } from '../../src/cli/score.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { packModel } from '../../src/pack/writer.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';
import { REPO, runQuern } from '../support/cli.ts';
import { runCommandsInProcess } from '../support/in-process.ts';

const { dir, remove } = temporaryDirectory('score-stdin');
afterAll(remove);

const model = join(dir, 'model.qm');
// 4 KiB pieces: the ~40 KB texts are ten or so of them, so pieces meet workers and lines run on.
const CHUNK = ['--chunk-size', '4KiB', '--quiet'];
const BAD_AT = 1000;

// Plain text with blank and white-space lines, CRLF ends and, on line BAD_AT, invalid UTF-8.
const sentences = markovCorpus(41, 1600, 40, 12).map((words) => words.join(' '));
const textLines: Buffer[] = sentences.map((line, i) => Buffer.from(i % 9 === 4 ? '' : i % 13 === 6 ? ` \t${line}\r` : line));
textLines[BAD_AT - 1] = Buffer.from([0x66, 0xff, 0x66]);
const text = Buffer.concat(textLines.flatMap((line) => [line, Buffer.from('\n')]));
// JSON Lines: two sentences per document; line BAD_AT / 2 is not JSON.
const documents = Array.from({ length: sentences.length / 2 }, (_, i) => JSON.stringify({ id: i, body: { text: `${sentences[2 * i]}\n${sentences[2 * i + 1]}` } }));
documents[BAD_AT / 2 - 1] = '{"id": 499, "body": ';
const jsonl = Buffer.from(documents.join('\n') + '\n');

const files = { text: join(dir, 'held.txt'), jsonl: join(dir, 'held.data') };

beforeAll(async () => {
  await packModel(estimateWith('modified-kneser-ney', countCorpus(markovCorpus(40, 600, 40, 12), 3), []), { fingerprint: '' }, nodeFs, model);
  writeFileSync(files.text, text);
  writeFileSync(files.jsonl, jsonl);
});

interface Case {
  name: string;
  /** What is piped in, and the file of the same text. */
  input: Buffer;
  file: string;
  options: string[];
  /** Workers for the sums (--json) and for the per-line records. */
  workers: { json: number; perLine: number };
}

// A CLI run with two workers costs ~4 s here (each worker loads the sources), one ~1.5 s: each
// format runs on one worker and on two, and sums and records are each checked on one and on two.
const cases: Case[] = [
  { name: 'plain text', input: text, file: files.text, options: ['--skip-bad'], workers: { json: 1, perLine: 2 } },
  { name: 'gzip', input: gzipSync(text), file: files.text, options: ['--skip-bad'], workers: { json: 2, perLine: 1 } },
  { name: 'JSON Lines', input: jsonl, file: files.jsonl, options: ['--skip-bad', '--format', 'jsonl', '--text-field', 'body.text'], workers: { json: 1, perLine: 2 } },
];

/** `quern score` of `-` (piped `input`) and `file` together; fails the test unless it succeeds. */
async function scoreWithStdin(c: Case, workers: number, output: '--json' | '--per-line'): Promise<string> {
  const result = await runQuern(['score', model, '-', c.file, ...CHUNK, ...c.options, '--workers', String(workers), output], { input: c.input });
  expect(result.stderr).toBe('');
  expect(result.status).toBe(0);
  return result.stdout;
}

describe('quern score - (standard input)', () => {
  test.each(cases)('$name: the same sums, totals and per-line records as the file of the same text ($workers.json and $workers.perLine workers)', async (c) => {
    // The file's totals as a second copy of it gives them: the expected total of `-` and the file.
    const copy = join(dir, `copy-${c.name.replace(/\W/g, '')}`);
    copyFileSync(c.file, copy);
    const expected = JSON.parse(await runCommandsInProcess([scoreCommand], ['score', model, c.file, copy, ...CHUNK, ...c.options, '--workers', '1', '--json']));
    const [json, lines] = await Promise.all([scoreWithStdin(c, c.workers.json, '--json'), scoreWithStdin(c, c.workers.perLine, '--per-line')]);

    const result = JSON.parse(json);
    expect(result.files.map((f: { file: string }) => f.file)).toEqual(['-', c.file]);
    const [piped, read] = result.files;
    expect(piped.sentences).toBeGreaterThan(1000);
    expect(piped.skipped).toBe(1);
    expect(piped.firstSkipped.line).toBe(c.file === files.jsonl ? BAD_AT / 2 : BAD_AT);
    expect({ ...piped, file: '' }).toEqual({ ...read, file: '' });
    expect(result.total).toEqual(expected.total);

    const records = lines.trim().split('\n').map((line) => JSON.parse(line));
    const ofPiped = records.filter((r) => r.file === '-');
    const ofFile = records.filter((r) => r.file === c.file);
    expect(ofPiped.length + ofFile.length).toBe(records.length);
    expect(ofPiped.length).toBe(c.file === files.jsonl ? documents.length - 1 : piped.sentences);
    expect(ofPiped.map((r) => ({ ...r, file: '' }))).toEqual(ofFile.map((r) => ({ ...r, file: '' })));
    // Standard input comes first; its lines are numbered on across the pieces, past the bad one.
    expect(records[0].file).toBe('-');
    expect(ofPiped.at(-1).line).toBe(c.file === files.jsonl ? documents.length : sentences.length);
  });

  test('an empty input is no sentence; - may stand among files; - twice is refused', async () => {
    const result = await runQuern(['score', model, files.text, '-', ...CHUNK, '--skip-bad', '--json', '--workers', '1'], { input: '' });
    expect(result.stderr).toBe('');
    expect(result.status).toBe(0);
    const [piped, read] = JSON.parse(result.stdout).files;
    expect(piped).toMatchObject({ file: '-', sentences: 0, tokens: 0, skipped: 0 });
    expect(read.file).toBe(files.text);
    expect(read.sentences).toBeGreaterThan(1000);
    await expect(runCommandsInProcess([scoreCommand], ['score', model, '-', files.text, '-', '--quiet'])).rejects.toMatchObject({ code: 'config', message: expect.stringMatching(/standard input\) is given 2 times/) });
    // Other arguments that begin with '-' are still options; unknown ones are refused.
    await expect(runCommandsInProcess([scoreCommand], ['score', model, files.text, '--typo', '--quiet'])).rejects.toThrow('Unknown argument: typo');
    await expect(runCommandsInProcess([scoreCommand], ['score', '--typo', model, files.text, '--quiet'])).rejects.toThrow('Unknown argument before <model>');
  });

  test('bad input on standard input: status 3 and the file\'s message, naming - and the line', async () => {
    const failed = async (input: Buffer, options: string[]): Promise<string> => {
      const result = await runQuern(['score', model, '-', ...CHUNK, ...options], { input });
      expect(result.status).toBe(3);
      expect(result.stdout).toBe('');
      return result.stderr;
    };
    const fileError = async (file: string, options: string[]): Promise<string> =>
      ((await runCommandsInProcess([scoreCommand], ['score', model, file, ...CHUNK, ...options]).catch((e) => e)) as Error).message;
    const asStdin = (message: string, file: string): string => `quern: ${message.replace(/^(\S+?)(:\d+ \(byte \d+\))/, (_, path: string, at: string) => { expect(path).toBe(file); return `-${at} of standard input`; })}\n`;

    const clean = Buffer.from(sentences.join('\n') + '\n');
    const cut = gzipSync(clean).subarray(0, 9000);
    const cutFile = join(dir, 'cut.txt.gz');
    writeFileSync(cutFile, cut);
    const jsonOptions = ['--workers', '1', '--format', 'jsonl', '--text-field', 'body.text'];
    // The files' messages (in this process, one at a time), then the same inputs piped, three at once.
    const messages = [await fileError(files.text, ['--workers', '1']), await fileError(files.jsonl, jsonOptions), await fileError(cutFile, ['--workers', '1'])];
    const [utf8, malformed, truncated] = (await Promise.all([
      // Invalid UTF-8 (one worker: a piece read by a worker fails alike, test/score/parallel.test.ts).
      failed(text, ['--workers', '1']),
      // A malformed JSON Lines record.
      failed(jsonl, jsonOptions),
      // A gzip stream that breaks off: fatal even with --skip-bad.
      failed(cut, ['--workers', '1', '--skip-bad']),
    ])).map((stderr, i) => [messages[i], stderr]);
    expect(utf8[0]).toMatch(new RegExp(`:${BAD_AT} \\(byte \\d+\\): invalid UTF-8$`));
    expect(utf8[1]).toBe(asStdin(utf8[0], files.text));
    expect(malformed[0]).toMatch(new RegExp(`:${BAD_AT / 2} \\(byte \\d+\\): malformed JSON`));
    expect(malformed[1]).toBe(asStdin(malformed[0], files.jsonl));
    expect(truncated[0]).toMatch(/truncated or corrupt gzip data/);
    expect(truncated[1]).toBe(asStdin(truncated[0], cutFile));

    // A bad line while the writer still holds the pipe open: its piece is all written (4 KiB past
    // the line's start), the next one not, and the command ends without waiting for the rest.
    const child = spawn(process.execPath, [join(REPO, 'bin/quern.js'), 'score', model, '-', ...CHUNK, '--workers', '1'], { cwd: REPO });
    let stderr = '';
    child.stderr.setEncoding('utf8').on('data', (data: string) => { stderr += data; });
    child.stdin.on('error', () => undefined);
    child.stdin.write(text.subarray(0, text.indexOf(Buffer.from([0x66, 0xff, 0x66])) + 4096 + 300));
    const status = await new Promise<number | null>((resolve) => child.on('close', (code) => resolve(code)));
    child.stdin.destroy();
    expect(status).toBe(3);
    expect(stderr).toBe(utf8[1]);
  });
});
