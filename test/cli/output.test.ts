/**
 * Standard output that stops being read or cannot be written: `quern … | head` ends quietly with
 * status 0 once the reader has gone (a program stops at a closed pipe: common practice, as SIGPIPE
 * does by default), and a failing write (a full disk) is an io error, status 4, with the cause.
 */
import { spawn } from 'node:child_process';
import { closeSync, existsSync, openSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { packModel } from '../../src/pack/writer.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { temporaryDirectory } from '../pack/support.ts';
import { REPO } from '../support/cli.ts';

const { dir, remove } = temporaryDirectory('stdout');
afterAll(remove);

const model = join(dir, 'model.qm');
const text = join(dir, 'text.txt');
/** `quern score --per-line` of ~5,000 sentences: several hundred KB, more than a pipe holds. */
const args = (): string[] => [join(REPO, 'bin/quern.js'), 'score', model, text, '--per-line', '--quiet', '--workers', '2', '--chunk-size', '16KiB'];

async function prepare(): Promise<void> {
  if (existsSync(model)) return;
  await packModel(estimateWith('modified-kneser-ney', countCorpus(markovCorpus(31, 500, 30, 10), 3), []), { fingerprint: '' }, nodeFs, model);
  writeFileSync(text, markovCorpus(32, 5000, 30, 10).map((words) => words.join(' ')).join('\n') + '\n');
}

describe('standard output', () => {
  test('a reader that stops after the first bytes: the command ends quietly, status 0', async () => {
    await prepare();
    const child = spawn(process.execPath, args(), { cwd: REPO });
    let stderr = '';
    let first = '';
    child.stderr.setEncoding('utf8').on('data', (data: string) => { stderr += data; });
    child.stdout.once('data', (data: Buffer) => {
      first = data.toString('utf8');
      child.stdout.destroy();
    });
    const status = await new Promise<number | null>((resolve) => child.on('close', (code) => resolve(code)));
    expect(first).toMatch(/^\{"file":/);
    expect(stderr).toBe('');
    expect(status).toBe(0);
  });

  test.runIf(existsSync('/dev/full'))('a write that fails (a full disk): status 4, naming the cause', async () => {
    await prepare();
    const full = openSync('/dev/full', 'w');
    try {
      const child = spawn(process.execPath, args(), { cwd: REPO, stdio: ['ignore', full, 'pipe'] });
      let stderr = '';
      child.stderr!.setEncoding('utf8').on('data', (data: string) => { stderr += data; });
      const status = await new Promise<number | null>((resolve) => child.on('close', (code) => resolve(code)));
      expect(status).toBe(4);
      expect(stderr).toMatch(/^quern: writing the output failed: ENOSPC/);
    } finally {
      closeSync(full);
    }
  });
});
