/** Bad input and bad options through the CLI: a clear message, the right exit status, nothing trusted half-done. */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { gzipSync } from 'node:zlib';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { runQuern, tempDir } from '../support/cli.ts';

function setup(files: Record<string, string | Buffer>): string {
  const dir = tempDir();
  for (const [name, content] of Object.entries(files)) writeFileSync(path.join(dir, name), content);
  return dir;
}

describe('bad input', () => {
  test('a malformed JSON line stops the job with file, line and cause; exit status 3; the count is not marked done', async () => {
    const dir = setup({ 'a.jsonl': '{"t":"ferry leaves"}\n{"t": oops}\n{"t":"ferry docks"}\n' });
    const job = path.join(dir, 'job');
    const result = await runQuern(['count', path.join(dir, 'a.jsonl'), '--text-field', 't', '--job', job, '--quiet']);
    expect(result.status).toBe(3);
    expect(result.stderr).toMatch(new RegExp(`${path.join(dir, 'a.jsonl').replace(/[/.]/g, '\\$&')}:2`));
    expect(result.stderr).toMatch(/JSON/i);
    const manifest = JSON.parse(readFileSync(path.join(job, 'job.json'), 'utf8'));
    expect(manifest.stages.vocab.status).not.toBe('done');
    expect(existsSync(path.join(job, 'job.lock'))).toBe(false);
  });

  test('--skip-bad counts every skipped record per file and reports it', async () => {
    const dir = setup({ 'a.jsonl': '{"t":"ferry leaves"}\n{"t": oops}\n{"x":1}\n{"t":"ferry docks"}\n' });
    const result = await runQuern(['count', path.join(dir, 'a.jsonl'), '--text-field', 't', '--job', path.join(dir, 'job'), '--skip-bad', '--quiet', '--json']);
    expect(result.status).toBe(0);
    const summary = JSON.parse(result.stdout);
    expect(summary.skipped).toHaveLength(1);
    expect(summary.skipped[0].skipped).toBe(2);
    expect(summary.skipped[0].samples.map((s: { line: number }) => s.line)).toEqual([2, 3]);
    expect(summary.sentences).toBe(2);
    expect(summary.lines).toBe(4);
  });

  test('invalid UTF-8 names the line; a truncated gzip stream is an input error', async () => {
    const dir = setup({
      'a.txt': Buffer.concat([Buffer.from('quay one\nquay two\n'), Buffer.from([0x71, 0xff, 0x0a]), Buffer.from('quay four\n')]),
      'b.txt.gz': gzipSync(Buffer.from(Array.from({ length: 3000 }, (_, i) => `harbour log entry ${(i * 7919) % 10007}`).join('\n'))).subarray(0, 3000),
    });
    const bad = await runQuern(['count', path.join(dir, 'a.txt'), '--job', path.join(dir, 'job1'), '--quiet']);
    expect(bad.status).toBe(3);
    expect(bad.stderr).toMatch(/a\.txt:3/);
    expect(bad.stderr).toMatch(/UTF-8/);
    const gz = await runQuern(['count', path.join(dir, 'b.txt.gz'), '--job', path.join(dir, 'job2'), '--quiet']);
    expect(gz.status).toBe(3);
    expect(gz.stderr).toMatch(/b\.txt\.gz/);
    expect(gz.stderr).toMatch(/gzip/);
  });

  test('empty files and empty lines are fine and counted', async () => {
    const dir = setup({ 'empty.txt': '', 'blank.txt': '\n\n  \nferry\n' });
    const result = await runQuern(['count', dir, '--job', path.join(dir, 'job'), '--quiet', '--json']);
    expect(result.stderr).toBe('');
    const summary = JSON.parse(result.stdout);
    expect(summary).toMatchObject({ inputs: 2, lines: 4, emptyLines: 3, sentences: 1, tokens: 1 });
  });
});

describe('bad options', () => {
  test.each([
    [['--order', '9'], /--order must be a whole number from 1 to 7/],
    [['--order', '0'], /--order/],
    [['--memory', 'lots'], /--memory expects a size/],
    [['--workers', '0'], /--workers/],
    [['--bogus'], /Unknown argument/],
  ])('%j is refused with exit status 2', async (args, message) => {
    const dir = setup({ 'a.txt': 'ferry\n' });
    const result = await runQuern(['count', path.join(dir, 'a.txt'), '--job', path.join(dir, 'job'), ...args]);
    expect(result.status).toBe(2);
    expect(result.stderr).toMatch(message);
  });

  test('no input matching a pattern, and JSON Lines without --text-field', async () => {
    const dir = setup({ 'a.jsonl': '{"t":"x"}\n' });
    const none = await runQuern(['count', path.join(dir, 'nothing-*.txt'), '--job', path.join(dir, 'job')]);
    expect(none.status).toBe(3);
    expect(none.stderr).toMatch(/no input matches/);
    const field = await runQuern(['count', path.join(dir, 'a.jsonl'), '--job', path.join(dir, 'job2')]);
    expect(field.status).toBe(2);
    expect(field.stderr).toMatch(/--text-field/);
  });

  test('a job started with other settings is not resumed silently', async () => {
    const dir = setup({ 'a.txt': 'ferry leaves\n' });
    const job = path.join(dir, 'job');
    expect((await runQuern(['count', path.join(dir, 'a.txt'), '--job', job, '--order', '2', '--quiet'])).status).toBe(0);
    const other = await runQuern(['count', path.join(dir, 'a.txt'), '--job', job, '--order', '3', '--quiet']);
    expect(other.status).toBe(2);
    expect(other.stderr).toMatch(/order: job has 2, this run asks for 3/);
    writeFileSync(path.join(dir, 'a.txt'), 'ferry leaves late\n');
    const changed = await runQuern(['count', path.join(dir, 'a.txt'), '--job', job, '--order', '2', '--quiet']);
    expect(changed.status).toBe(2);
    expect(changed.stderr).toMatch(/input changed size/);
    const restarted = await runQuern(['count', path.join(dir, 'a.txt'), '--job', job, '--order', '2', '--quiet', '--restart', '--json']);
    expect(restarted.status).toBe(0);
    expect(JSON.parse(restarted.stdout).tokens).toBe(3);
  });
});
