/**
 * Reading an ARPA file whose n-grams are not in Quern's id order, or larger than the sort's memory
 * (src/pack/arpa-rows.ts): each order sorted in runs on disk and merged, within a budget of a few
 * KB here. The model read must not depend on the order of a section's lines or on the budget; a
 * repeated n-gram or a missing context is found across runs and named by its line; the sort's
 * files are gone afterwards, whether the read succeeded or failed. And `quern pack --memory` packs a
 * shuffled file into the same bytes as the file in order. A gzipped ARPA file reads as its text (and
 * `writeArpaFile` writes one for a .gz name); damaged gzip data stops the read.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { gunzipSync } from 'node:zlib';
import { join } from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { packCommand } from '../../src/cli/pack.ts';
import { QuernError } from '../../src/errors.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { materialiseModel } from '../../src/estimate/model-source.ts';
import { faultyFs, nodeFs } from '../../src/job/fsio.ts';
import { openArpaSource, readArpa, writeArpaFile } from '../../src/pack/arpa.ts';
import { Spool } from '../../src/pack/spool.ts';
import { ARPA_BLOCK_ROWS, ARPA_SORT_ROWS_MIN } from '../../src/limits.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { runCommandsInProcess } from '../support/in-process.ts';
import { seededRandom } from '../support/seeded.ts';
import { temporaryDirectory } from './support.ts';

const { dir, remove } = temporaryDirectory('arpa-sort');
afterAll(remove);

// Order 3, with more trigrams than a block and many sort buffers of the smallest size.
const model = estimateWith('modified-kneser-ney', countCorpus(markovCorpus(71, 2500, 300, 14), 3), []);
const sortedPath = join(dir, 'sorted.arpa');
await writeArpaFile(model, nodeFs, sortedPath);
const sortedText = readFileSync(sortedPath, 'utf8');

/** The text with the entry lines of each section of order ≥ 2 in a seeded random order (the
 *  unigrams' order gives the ids, so it stays). */
function shuffleSections(text: string, seed: number): string {
  const random = seededRandom(seed);
  const lines = text.split('\n');
  let i = 0;
  while (i < lines.length) {
    if (!/^\\\d+-grams:$/.test(lines[i]) || lines[i] === '\\1-grams:') {
      i++;
      continue;
    }
    const start = i + 1;
    let end = start;
    while (end < lines.length && lines[end] !== '') end++;
    const section = lines.slice(start, end);
    for (let j = section.length - 1; j > 0; j--) {
      const k = Math.floor(random() * (j + 1));
      [section[j], section[k]] = [section[k], section[j]];
    }
    lines.splice(start, section.length, ...section);
    i = end;
  }
  return lines.join('\n');
}

/** Spools in `folder`, named by order and role; `made` lists every path created. */
function spoolsIn(folder: string): { spools: (n: number, name: string) => Promise<Spool>; made: string[] } {
  const made: string[] = [];
  return {
    made,
    spools: (n, name) => {
      const path = join(folder, `o${n}-${name}.tmp`);
      made.push(path);
      return Spool.create(nodeFs, path);
    },
  };
}

let fileIndex = 0;
function arpaFile(text: string): string {
  const path = join(dir, `case-${fileIndex++}.arpa`);
  writeFileSync(path, text);
  return path;
}

describe('sorting on disk', () => {
  test('the test model is large enough: a full block and a part and many of the smallest sort buffers per order', () => {
    expect(model.orders[2].log10Prob.length).toBeGreaterThan(ARPA_BLOCK_ROWS);
    expect(model.orders[1].log10Prob.length).toBeGreaterThan(4 * ARPA_SORT_ROWS_MIN);
  });

  test('a file in id order passes through as one run per order, whatever the budget', async () => {
    const { spools, made } = spoolsIn(dir);
    const source = await openArpaSource(sortedPath, spools, { sortBytes: 1 });
    expect(made.map((path) => path.slice(dir.length + 1))).toEqual(['o2-r0.tmp', 'o3-r0.tmp']);
    expect(await materialiseModel(source)).toEqual(await readArpa(sortedPath));
    await source.remove();
    expect(made.filter(existsSync)).toEqual([]);
  });

  test('shuffled sections read as the same model: sorted in runs and merged within the smallest budget, or in one run with the default', async () => {
    const inOrder = await readArpa(sortedPath);
    // The model as written (ids, contexts; values to the printed precision: arpa.test.ts).
    expect(inOrder.orders.map((table) => table.ids)).toEqual(model.orders.map((table) => table.ids));
    const shuffled = arpaFile(shuffleSections(sortedText, 72));
    expect(readFileSync(shuffled, 'utf8')).not.toBe(sortedText);

    const { spools, made } = spoolsIn(dir);
    const source = await openArpaSource(shuffled, spools, { sortBytes: 1 });
    const runs = made.filter((path) => /o3-r\d+\.tmp$/.test(path)).length;
    expect(runs).toBe(Math.ceil(model.orders[2].log10Prob.length / ARPA_SORT_ROWS_MIN));
    expect(made.some((path) => path.endsWith('o3-sorted.tmp'))).toBe(true);
    expect(await materialiseModel(source)).toEqual(inOrder);
    await source.remove();
    expect(made.filter(existsSync)).toEqual([]);

    // The default budget holds each order at once: one sorted run, no merge.
    const whole = spoolsIn(dir);
    const one = await openArpaSource(shuffled, whole.spools);
    expect(whole.made.map((path) => path.slice(dir.length + 1))).toEqual(['o2-r1.tmp', 'o3-r1.tmp']);
    expect(await materialiseModel(one)).toEqual(inOrder);
    await one.remove();
  });

  test('a file in order up to some point, then not: the ascending part is one run, the rest sorted runs', async () => {
    const lines = sortedText.split('\n');
    const start = lines.indexOf('\\3-grams:') + 1;
    let end = start;
    while (lines[end] !== '') end++;
    // The last 3,000 trigrams reversed.
    lines.splice(end - 3000, 3000, ...lines.slice(end - 3000, end).reverse());
    const { spools, made } = spoolsIn(dir);
    const source = await openArpaSource(arpaFile(lines.join('\n')), spools, { sortBytes: 1 });
    expect(made.some((path) => path.endsWith('o3-r0.tmp')) && made.some((path) => path.endsWith('o3-r1.tmp'))).toBe(true);
    expect(await materialiseModel(source)).toEqual(await readArpa(sortedPath));
    await source.remove();
  });
});

describe('errors found by the sort name the line, and leave no files', () => {
  const shuffledLines = shuffleSections(sortedText, 73).split('\n');
  const trigramStart = shuffledLines.indexOf('\\3-grams:') + 1;

  async function expectInputError(lines: string[], pattern: RegExp): Promise<void> {
    const path = arpaFile(lines.join('\n'));
    const { spools, made } = spoolsIn(dir);
    const error = await openArpaSource(path, spools, { sortBytes: 1 }).catch((caught: unknown) => caught);
    expect(error).toBeInstanceOf(QuernError);
    expect((error as QuernError).code).toBe('input');
    expect((error as Error).message).toMatch(pattern);
    expect(made.length).toBeGreaterThan(2);
    expect(made.filter(existsSync)).toEqual([]);
  }

  test('an n-gram twice, in runs far apart: the later line', async () => {
    const lines = [...shuffledLines];
    const repeated = lines[trigramStart + 5];
    // Far from its first occurrence (another run), and the count raised to match.
    const at = trigramStart + 4 * ARPA_SORT_ROWS_MIN + 17;
    lines.splice(at, 0, repeated);
    const declared = lines.findIndex((line) => line.startsWith('ngram 3='));
    lines[declared] = `ngram 3=${model.orders[2].log10Prob.length + 1}`;
    const words = repeated.split('\t')[1];
    await expectInputError(lines, new RegExp(`:${at + 1}: the n-gram "${words}" appears twice`));
  });

  test('a trigram whose context is missing: its line', async () => {
    // A bigram that is the context of exactly one trigram, removed.
    const trigramLines = shuffledLines.slice(trigramStart).filter((line) => line.split('\t').length === 2 && line.split('\t')[1].split(' ').length === 3);
    const contextUses = new Map<string, number>();
    for (const line of trigramLines) {
      const context = line.split('\t')[1].split(' ').slice(0, 2).join(' ');
      contextUses.set(context, (contextUses.get(context) ?? 0) + 1);
    }
    const [context] = [...contextUses].find(([, uses]) => uses === 1) as [string, number];
    const lines = shuffledLines.filter((line) => line.split('\t')[1] !== context);
    expect(lines.length).toBe(shuffledLines.length - 1);
    const declared = lines.findIndex((line) => line.startsWith('ngram 2='));
    lines[declared] = `ngram 2=${model.orders[1].log10Prob.length - 1}`;
    const user = lines.findIndex((line, index) => index > declared && line.split('\t')[1]?.startsWith(`${context} `) === true);
    await expectInputError(lines, new RegExp(`:${user + 1}: the n-gram "${lines[user].split('\t')[1]}" has no \\(n−1\\)-gram "${context}" for its context`));
  });
});

test('quern pack --memory: a shuffled file packs into the bytes of the file in order; no temporary file is left', async () => {
  const folder = join(dir, 'cli');
  mkdirSync(folder);
  const shuffled = join(folder, 'shuffled.arpa');
  writeFileSync(shuffled, shuffleSections(sortedText, 74));
  const run = (args: string[]): Promise<string> => runCommandsInProcess([packCommand], args);
  expect(await run(['pack', sortedPath, '--out', join(folder, 'a.qm')])).toMatch(/^packed .*a\.qm: order 3/);
  expect(await run(['pack', shuffled, '--out', join(folder, 'b.qm'), '--memory', '64KiB'])).toMatch(/^packed .*b\.qm: order 3/);
  expect(readFileSync(join(folder, 'b.qm')).equals(readFileSync(join(folder, 'a.qm')))).toBe(true);
  expect(readdirSync(folder).sort()).toEqual(['a.qm', 'b.qm', 'shuffled.arpa']);
  await expect(run(['pack', shuffled, '--out', join(folder, 'c.qm'), '--memory', 'lots'])).rejects.toThrow(/--memory expects a size/);
  // A file that fails in the sort: no model, no temporary file.
  writeFileSync(shuffled, shuffleSections(sortedText, 74).replace('\\end\\', 'oops\n\\end\\'));
  await expect(run(['pack', shuffled, '--out', join(folder, 'd.qm'), '--memory', '64KiB'])).rejects.toThrow(/shuffled\.arpa:\d+: /);
  expect(readdirSync(folder).sort()).toEqual(['a.qm', 'b.qm', 'shuffled.arpa']);
});

describe('gzip', () => {
  /** A new folder `name` holding the test model exported to model.arpa.gz. */
  async function gzippedIn(name: string): Promise<{ folder: string; gz: string; bytes: Buffer }> {
    const folder = join(dir, name);
    mkdirSync(folder);
    const gz = join(folder, 'model.arpa.gz');
    await writeArpaFile(model, nodeFs, gz);
    return { folder, gz, bytes: readFileSync(gz) };
  }

  test('export to a .gz name writes the ARPA text gzipped; reading and packing it give what the plain file gives', async () => {
    const { folder, gz, bytes } = await gzippedIn('gzip');
    expect([bytes[0], bytes[1]]).toEqual([0x1f, 0x8b]);
    expect(gunzipSync(bytes).toString('utf8')).toBe(sortedText);
    expect(await readArpa(gz)).toEqual(await readArpa(sortedPath));
    // Detected by its magic bytes, not its name.
    const renamed = join(folder, 'model-gzipped.arpa');
    writeFileSync(renamed, bytes);
    const run = (args: string[]): Promise<string> => runCommandsInProcess([packCommand], args);
    await run(['pack', renamed, '--out', join(folder, 'from-gzip.qm')]);
    await run(['pack', sortedPath, '--out', join(folder, 'from-text.qm')]);
    expect(readFileSync(join(folder, 'from-gzip.qm')).equals(readFileSync(join(folder, 'from-text.qm')))).toBe(true);
  });

  test('a file system that fails while gzip output is written: an io error each time, never a hang, and no partial file left', async () => {
    const folder = join(dir, 'gzip-faults');
    mkdirSync(folder);
    const target = join(folder, 'model.arpa.gz');
    let failures = 0;
    for (let operations = 0; ; operations++) {
      const fs = faultyFs(nodeFs, { failAfterOperations: operations, mode: 'once', errno: 'ENOSPC' });
      const error = await writeArpaFile(model, fs, target).then(() => null, (caught: unknown) => caught);
      if (fs.operations() <= operations) {
        expect(error).toBeNull(); // no fault was injected: it succeeded
        break;
      }
      expect(error).toBeInstanceOf(QuernError);
      expect((error as QuernError).code).toBe('io');
      // No temporary file; the file itself only when the failure came after its rename, whole.
      const left = readdirSync(folder);
      expect(left.filter((name) => name !== 'model.arpa.gz')).toEqual([]);
      if (left.length > 0) expect(gunzipSync(readFileSync(target)).toString('utf8')).toBe(sortedText);
      failures++;
    }
    // The create, writes (the text is larger than gzip's buffers, so the writer is held back by
    // them while a write fails), the sync, the rename and the folder's sync.
    expect(failures).toBeGreaterThanOrEqual(5);
    expect(gunzipSync(readFileSync(target)).toString('utf8')).toBe(sortedText);
  });

  test('a truncated or damaged gzip stream: an input error naming the file and the line reached; no file left', async () => {
    const { folder, bytes } = await gzippedIn('gzip-bad');
    const truncated = join(folder, 'truncated.arpa.gz');
    writeFileSync(truncated, bytes.subarray(0, Math.floor(bytes.length * 0.6)));
    const damaged = join(folder, 'damaged.arpa.gz');
    const flipped = Buffer.from(bytes);
    flipped[Math.floor(bytes.length / 2)] ^= 0xff;
    writeFileSync(damaged, flipped);
    for (const path of [truncated, damaged]) {
      // (damaged data may decode into text that breaks first, or fail gzip's checksum at the end)
      const { spools, made } = spoolsIn(folder);
      const error = await openArpaSource(path, spools).catch((caught: unknown) => caught);
      expect(error, path).toBeInstanceOf(QuernError);
      expect((error as QuernError).code).toBe('input');
      expect((error as Error).message).toMatch(new RegExp(`^${path.replace(/[.]/g, '\\.')}:\\d+: (truncated or corrupt gzip data|not valid UTF-8|the )`));
      expect(made.filter(existsSync)).toEqual([]);
    }
    // The truncated stream reads well up to its end, so it is the gzip reader that stops it.
    const truncatedError = await openArpaSource(truncated, spoolsIn(folder).spools).catch((caught: unknown) => caught as Error);
    expect((truncatedError as Error).message).toMatch(/truncated or corrupt gzip data \(unexpected end of file\)/);
    expect(readdirSync(folder).sort()).toEqual(['damaged.arpa.gz', 'model.arpa.gz', 'truncated.arpa.gz']);
  });
});
