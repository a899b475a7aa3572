/**
 * The worked example of docs/model-file.md, byte for byte: the spec's hex dump is what the writer
 * produces, and the lookups it walks through are what the reader answers.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, expect, test } from 'vitest';
import { countCorpus } from '../../src/estimate/counts.ts';
import { estimate } from '../../src/estimate/estimate.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { fnv1a32 } from '../../src/pack/format.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { REPO } from '../support/cli.ts';
import { expectClose, readPacked, temporaryDirectory } from './support.ts';

const { dir, remove } = temporaryDirectory('format');
afterAll(remove);

/** The bytes of the hex dump under "## Worked example" in docs/model-file.md. */
function documentedBytes(): Buffer {
  const text = readFileSync(join(REPO, 'docs/model-file.md'), 'utf8');
  const section = text.slice(text.indexOf('## Worked example'));
  const dump = section.slice(section.indexOf('```'), section.indexOf('```', section.indexOf('```') + 3));
  const bytes: number[] = [];
  for (const line of dump.split('\n')) {
    const match = /^([0-9a-f]{4})  ((?:[0-9a-f]{2} ){15}[0-9a-f]{2})/.exec(line);
    if (match === null) continue;
    expect(Number.parseInt(match[1], 16)).toBe(bytes.length);
    bytes.push(...match[2].split(' ').map((byte) => Number.parseInt(byte, 16)));
  }
  return Buffer.from(bytes);
}

test('the worked example of docs/model-file.md is what the writer writes, and reads as the spec says', async () => {
  const model = estimate(countCorpus([['a', 'b'], ['b']], 2), { method: 'witten-bell' });
  const path = join(dir, 'example.qm');
  await packModel(model, { fingerprint: 'example', floatBits: 32 }, nodeFs, path);
  const written = readFileSync(path);
  expect(written.length).toBe(768);
  expect(written.toString('hex')).toBe(documentedBytes().toString('hex'));

  // The packed integers read bit by bit as the spec words them: children offsets of order 1 after
  // the 16 bytes of width, reserved field and base; word ids of order 2.
  expect([0, 1, 2, 3, 4, 5].map((i) => readPacked(written, 0x170 + 16, i, 3))).toEqual([0, 2, 2, 3, 4, 4]);
  expect([0, 1, 2, 3].map((i) => readPacked(written, 0x188, i, 3))).toEqual([2, 3, 1, 2]);

  const packed = await openModel(path);
  expect([0, 1, 2, 3, 4].map((id) => packed.word(id))).toEqual(['<s>', '</s>', 'b', 'a', '<unk>']);
  const hashes = ['a', '<s>', '</s>', 'b', '<unk>'].map((word) => fnv1a32(Buffer.from(word), 0, Buffer.byteLength(word)));
  expect(hashes).toEqual([0xe40c292c, 0x0c707bd2, 0xd79c9359, 0xe70c2de5, 0x9d559b61]);
  const score = packed.scoreSentence(['a', 'b']);
  expect(score.tokens.map((token) => Number(token.log10Prob.toFixed(5)))).toEqual([-0.44445, -0.17271, -0.10721]);
  expectClose(score.log10Prob, -0.72437, 1e-5);
  const backedOff = packed.logProb([2], 3);
  expect(backedOff.order).toBe(1);
  expectClose(backedOff.log10Prob, -1.13717, 1e-5);
});
