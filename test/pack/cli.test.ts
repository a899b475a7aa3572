/**
 * The command modules `quern pack`, `quern info` and `quern export`, run in-process through yargs
 * (they are not registered in src/cli/main.ts yet): export → ARPA, pack it back, describe it.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, afterEach, expect, test, vi } from 'vitest';
import { exportCommand } from '../../src/cli/export.ts';
import { infoCommand } from '../../src/cli/info.ts';
import { packCommand } from '../../src/cli/pack.ts';
import { QuernError } from '../../src/errors.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { buildFile, childrenLayout, parseFile, readPacked, temporaryDirectory, writePacked } from './support.ts';
import { runCommandsInProcess } from '../support/in-process.ts';

const { dir, remove } = temporaryDirectory('cli');
afterAll(remove);
afterEach(() => vi.restoreAllMocks());

/** Runs the commands in-process and returns what they printed. */
const run = (args: string[]): Promise<string> => runCommandsInProcess([packCommand, infoCommand, exportCommand], args);

test('export a model file to ARPA, pack it back with 8-bit values, describe both', async () => {
  const train = markovCorpus(51, 150, 25, 10);
  const model = estimateWith('modified-kneser-ney', countCorpus(train, 3), []);
  const original = join(dir, 'original.qm');
  await packModel(model, { fingerprint: 'corpus-1', floatBits: 64 }, nodeFs, original);

  const arpa = join(dir, 'model.arpa');
  expect(await run(['export', original, '--out', arpa])).toBe('');
  expect(await run(['export', original])).toBe(readFileSync(arpa, 'utf8'));
  expect(await run(['export', original, '--format', 'arpa'])).toBe(readFileSync(arpa, 'utf8'));
  await expect(run(['export', original, '--format', 'text'])).rejects.toThrow(/Invalid values:[\s\S]*format/);

  const packed = join(dir, 'packed.qm');
  const summary = await run(['pack', arpa, '--out', packed, '--quant', '8', '--fingerprint', 'corpus-1']);
  expect(summary).toMatch(new RegExp(`^packed ${packed.replace(/[.]/g, '\\.')}: order 3, n-grams [\\d,]+ \\+ [\\d,]+ \\+ [\\d,]+, 8-bit quantised values, [\\d,]+ bytes \\([\\d.]+ per n-gram\\)\\n$`));
  const reopened = await openModel(packed);
  expect(reopened.parameters).toEqual(model.parameters);
  expect(reopened.fingerprint).toBe('corpus-1');
  expect(reopened.ngrams).toEqual(model.orders.map((table) => table.log10Prob.length));

  const info = await run(['info', packed]);
  expect(info).toContain('Quern model file, format 2.0');
  expect(info).toMatch(/values +8-bit quantised/);
  expect(info).toMatch(/lookups +WebAssembly \(step\), the file in one WebAssembly memory/);
  expect(info).toMatch(/method +modified-kneser-ney\n +order 1: D1 = [\d.]+, D2 = [\d.]+, D3\+ = [\d.]+ \((counts|fallback)\)/);
  expect(info).toMatch(/fingerprint +corpus-1/);
  expect(info).toMatch(/probability codebook of order 3 +\d+ +[\d,]+ bytes +crc32 [0-9a-f]{8}/);
  const json = JSON.parse(await run(['info', original, '--json']));
  expect(json.lookups).toBe('wasm');
  expect(json).toMatchObject({ order: 3, values: 'float64', normalised: true, fingerprint: 'corpus-1', cutoffs: [1, 1, 1] });

  const damaged = join(dir, 'damaged.qm');
  const bytes = readFileSync(original);
  bytes[bytes.length - 3] ^= 1;
  await nodeFs.create(damaged).then(async (file) => { await file.write(bytes); await file.close(); });
  await expect(run(['info', damaged])).rejects.toSatisfy((error: unknown) => error instanceof QuernError && error.code === 'corrupt');
  await expect(run(['pack', arpa, '--out', join(dir, 'x.qm'), '--quant', '8', '--float', '32'])).rejects.toThrow(/mutually exclusive/);
});

test('info checks checksums; info --check also the structure, which a file rewritten with fresh checksums can break', async () => {
  const model = estimateWith('witten-bell', countCorpus(markovCorpus(52, 80, 20, 8), 3), []);
  const original = join(dir, 'structure.qm');
  await packModel(model, { fingerprint: '' }, nodeFs, original);
  expect(await run(['info', original, '--check'])).toMatch(/bytes, every checksum verified, structure checked\n/);
  expect(await run(['info', original])).toMatch(/bytes, every checksum verified\n/);
  // Children of row 2 of order 1 moved past those of row 3: valid checksums, broken structure.
  const file = parseFile(readFileSync(original));
  const children = file.sections.find((section) => section.kind === 9 && section.order === 1)!;
  const layout = childrenLayout(children.bytes, model.orders[0].log10Prob.length);
  writePacked(children.bytes, layout.offsets, 2, layout.bits, readPacked(children.bytes, layout.offsets, 3, layout.bits) + 1);
  const crafted = join(dir, 'crafted.qm');
  writeFileSync(crafted, buildFile(file));
  expect(JSON.parse(await run(['info', crafted, '--json']))).toMatchObject({ structureChecked: false });
  await expect(run(['info', crafted, '--check'])).rejects.toSatisfy((error: unknown) =>
    error instanceof QuernError && error.code === 'corrupt' && /children of order 1\): the children of row 3 start before those of row 2/.test(error.message));
});
