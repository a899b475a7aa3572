/** Adding inputs to a counted job: only the new shards are read, and the result equals a count from scratch. */
import { execFileSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import * as path from 'node:path';
import { beforeAll, describe, expect, test } from 'vitest';
import { SyntheticModel, writeShardFile } from '../../scripts/lib/synthetic.ts';
import { storeDigest } from '../../src/merge/digest.ts';
import { runQuern, tempDir } from '../support/cli.ts';

describe('quern count --add', () => {
  let dir: string;
  beforeAll(() => {
    dir = tempDir();
    execFileSync('mkdir', ['-p', path.join(dir, 'old'), path.join(dir, 'new')]);
    const model = new SyntheticModel({ seed: 21, vocabularyTypes: 3000, successorRanks: 500, phraseCount: 300 });
    writeShardFile(model, 0, 250_000, path.join(dir, 'old', 'a.txt'));
    writeShardFile(model, 1, 150_000, path.join(dir, 'old', 'b.txt'));
    // A different seed: new words and a different ranking of the old ones.
    const other = new SyntheticModel({ seed: 22, vocabularyTypes: 4000, successorRanks: 500, phraseCount: 300 });
    writeShardFile(other, 0, 200_000, path.join(dir, 'new', 'c.txt'));
  });

  test('the store after --add equals counting all shards from scratch; only new chunks are read', async () => {
    const common = ['--order', '4', '--chunk-size', '64KiB', '--memory', '64MiB', '--quiet', '--json'];
    const scratch = path.join(dir, 'scratch');
    const all = await runQuern(['count', path.join(dir, 'old'), path.join(dir, 'new'), '--job', scratch, ...common]);
    expect(all.stderr).toBe('');
    const job = path.join(dir, 'job');
    const first = await runQuern(['count', path.join(dir, 'old'), '--job', job, ...common]);
    expect(first.stderr).toBe('');
    const chunksBefore = JSON.parse(readFileSync(path.join(job, 'job.json'), 'utf8')).chunks.length;
    const added = await runQuern(['count', path.join(dir, 'new'), '--job', job, '--add', ...common]);
    expect(added.stderr).toBe('');
    const summary = JSON.parse(added.stdout);
    expect(summary).toMatchObject({ inputs: 3, distinct: JSON.parse(all.stdout).distinct, tokens: JSON.parse(all.stdout).tokens });

    const manifest = JSON.parse(readFileSync(path.join(job, 'job.json'), 'utf8'));
    // The earlier chunks were re-keyed, not re-read: their read statistics are the first run's.
    expect(manifest.stages.remap.chunksDone.sort((a: number, b: number) => a - b)).toEqual(Array.from({ length: chunksBefore }, (_, i) => i));
    expect(readFileSync(path.join(job, 'vocab.tsv'), 'utf8')).toBe(readFileSync(path.join(scratch, 'vocab.tsv'), 'utf8'));
    const partitions = manifest.config.partitions;
    expect(await storeDigest(job, 4, partitions)).toBe(await storeDigest(scratch, 4, partitions));
    const [a, b] = await Promise.all([runQuern(['report', job, '--json']), runQuern(['report', scratch, '--json'])]);
    expect(JSON.parse(a.stdout)).toEqual(JSON.parse(b.stdout));
  });

  test('--add refuses a job with a vocabulary cap, saying why', async () => {
    const job = path.join(dir, 'capped');
    expect((await runQuern(['count', path.join(dir, 'old'), '--job', job, '--order', '2', '--vocab-top', '100', '--quiet'])).status).toBe(0);
    const result = await runQuern(['count', path.join(dir, 'new'), '--job', job, '--order', '2', '--vocab-top', '100', '--add', '--quiet']);
    expect(result.status).toBe(2);
    expect(result.stderr).toMatch(/caps its vocabulary/);
  });
});
