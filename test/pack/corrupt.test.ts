/**
 * Damaged model files: truncated, wrong magic or version, flipped bytes, offsets and lengths past
 * the end, structure that checksums cannot vouch for. Each must be a QuernError 'corrupt' naming the
 * file and the section — never a crash, a hang or a huge allocation — and a seeded fuzz test checks
 * that every changed file is refused while every unchanged one opens and answers as before.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { crc32 } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { openModel, type PackedModel } from '../../src/pack/reader.ts';
import { packModel } from '../../src/pack/writer.ts';
import { seededRandom } from '../support/seeded.ts';
import { estimateWith, markovCorpus } from '../estimate/support.ts';
import { buildFile, parseFile, resealHeader, resealTable, temporaryDirectory } from './support.ts';

const { dir, remove } = temporaryDirectory('corrupt');
afterAll(remove);

const train = markovCorpus(21, 60, 25, 10);
const probe = markovCorpus(22, 10, 25, 10);
let floatFile: Buffer;
let quantisedFile: Buffer;

beforeAll(async () => {
  const model = estimateWith('modified-kneser-ney', countCorpus(train, 3), []);
  await packModel(model, { fingerprint: 'fuzz' }, nodeFs, join(dir, 'float.qm'));
  await packModel(model, { fingerprint: 'fuzz', quantBits: 8 }, nodeFs, join(dir, 'quantised.qm'));
  floatFile = readFileSync(join(dir, 'float.qm'));
  quantisedFile = readFileSync(join(dir, 'quantised.qm'));
});

let caseIndex = 0;
/** Writes `bytes` to a fresh file and opens it; returns the model or the error. */
async function tryOpen(bytes: Uint8Array): Promise<{ path: string; model?: PackedModel; error?: unknown }> {
  const path = join(dir, `case-${caseIndex++}.qm`);
  writeFileSync(path, bytes);
  try {
    return { path, model: await openModel(path) };
  } catch (error) {
    return { path, error };
  }
}

/** Opens `bytes` and expects a corrupt-file error whose message names the file and matches `pattern`. */
async function expectCorrupt(bytes: Uint8Array, pattern: RegExp): Promise<string> {
  const { path, model, error } = await tryOpen(bytes);
  expect(model, 'the damaged file must not open').toBeUndefined();
  expect(error).toBeInstanceOf(QuernError);
  expect((error as QuernError).code).toBe('corrupt');
  const message = (error as Error).message;
  expect(message.startsWith(`${path}: `), message).toBe(true);
  expect(message).toMatch(pattern);
  return message;
}

function scores(model: PackedModel): number[] {
  return probe.map((words) => model.scoreSentence(words).log10ProbWithUnk);
}

describe('damaged files are refused with a corrupt-file error naming the file and the section', () => {
  test('truncated anywhere', async () => {
    for (const length of [0, 5, 8, 64, 127, 128, 200, floatFile.length >> 1, floatFile.length - 8, floatFile.length - 1]) {
      await expectCorrupt(floatFile.subarray(0, length), /header: (not a Quern model file|the file is \d+ bytes, shorter than the 128-byte header|the file is \d+ bytes but its header says \d+: it was truncated)/);
    }
    await expectCorrupt(Buffer.concat([floatFile, Buffer.alloc(8)]), /header: the file is \d+ bytes but its header says \d+: it was extended/);
  });

  test('wrong magic; another major version (older or newer); a newer minor version opens', async () => {
    const magic = Buffer.from(floatFile);
    magic.write('QRNRUN\u0001\u0000', 0, 'latin1');
    await expectCorrupt(magic, /header: not a Quern model file/);
    for (const [major, what] of [[2, 'a newer Quern wrote it'], [0, 'an older Quern wrote it']] as const) {
      const other = Buffer.from(floatFile);
      other.writeUInt16LE(major, 8);
      resealHeader(other);
      const message = await expectCorrupt(other, /header: format version \d\.0; this reader reads version 1\.x/);
      expect(message).toContain(what);
    }
    // Version 1.1 with a section kind this reader does not know: skipped (after its checksum).
    const file = parseFile(floatFile);
    file.header.writeUInt16LE(1, 10);
    file.sections.splice(3, 0, { kind: 99, order: 0, bytes: Buffer.from('a section from the future') });
    const newer = await tryOpen(buildFile(file));
    expect(newer.error).toBeUndefined();
    expect(scores(newer.model as PackedModel)).toEqual(scores((await tryOpen(floatFile)).model as PackedModel));
    expect(newer.model?.version).toEqual({ major: 1, minor: 1 });
    // The same unknown kind in a 1.0 file is damage.
    file.header.writeUInt16LE(0, 10);
    await expectCorrupt(buildFile(file), /section 3 \(section kind 99\): unknown section kind 99 in a version 1\.0 file/);
  });

  test('a flipped byte in the header, the section table, each section or the padding', async () => {
    const flip = (offset: number): Buffer => {
      const bytes = Buffer.from(floatFile);
      bytes[offset] ^= 0x10;
      return bytes;
    };
    await expectCorrupt(flip(30), /header: checksum mismatch/);
    await expectCorrupt(flip(126), /header: checksum mismatch/);
    await expectCorrupt(flip(128 + 5), /section table: checksum mismatch/);
    const model = (await tryOpen(floatFile)).model as PackedModel;
    for (const [index, section] of model.sections.entries()) {
      if (section.bytes === 0) continue;
      const name = section.name.replace(/[()]/g, '\\$&');
      await expectCorrupt(flip(section.offset + (section.bytes >> 1)), new RegExp(`section ${index} \\(${name}\\) at byte ${section.offset}: checksum mismatch`));
    }
    const padded = model.sections.find((section) => section.bytes % 8 !== 0);
    expect(padded).toBeDefined();
    await expectCorrupt(flip(padded!.offset + padded!.bytes), /padding byte \d+ is not zero/);
  });

  test('offsets and lengths past the end of the file, and counts the sections cannot hold (with valid checksums)', async () => {
    const edit = (change: (bytes: Buffer) => void, reseal: (bytes: Buffer) => void): Buffer => {
      const bytes = Buffer.from(floatFile);
      change(bytes);
      reseal(bytes);
      return bytes;
    };
    const entry = (index: number): number => 128 + 32 * index;
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(BigInt(floatFile.length + 8), entry(4) + 8), resealTable), /section 4 \(vocabulary hash\): starts at byte \d+; .* must start at byte \d+/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(2n ** 40n, entry(0) + 16), resealTable), /section 0 \(description\): 1099511627776 bytes at byte \d+ run past the end/);
    const last = floatFile.readUInt32LE(56) - 1;
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(b.readBigUInt64LE(entry(last) + 16) + 64n, entry(last) + 16), resealTable), /run past the end/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(2n ** 63n, entry(2) + 8), resealTable), /section 2 \(vocabulary words\): starts at byte/);
    await expectCorrupt(edit((b) => b.writeUInt32LE(1000, 56), resealHeader), /header: section count 1000 outside \[1, 64\]/);
    await expectCorrupt(edit((b) => b.writeUInt32LE(40, 56), resealHeader), /section table: checksum mismatch/);
    const short = Buffer.from(floatFile.subarray(0, 128 + 32 * 4));
    short.writeBigUInt64LE(BigInt(short.length), 16);
    short.writeUInt32LE(40, 56);
    resealHeader(short);
    await expectCorrupt(short, /section table: 40 entries at byte 128 run past the end of the 256-byte file/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(2n ** 60n, 64 + 8 * 2), resealHeader), /header: \d+ n-grams of order 3, over the limit/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(b.readBigUInt64LE(64 + 8) + 1n, 64 + 8), resealHeader), /word ids of order 2\): is \d+ bytes; the header's counts require \d+/);
    await expectCorrupt(edit((b) => b.writeUInt32LE(9, 28), resealHeader), /header: order 9 outside \[1, 7\]/);
  });

  test('structure the checksums cannot vouch for (a file rewritten with fresh checksums)', async () => {
    const rewrite = (source: Buffer, kind: number, order: number, change: (bytes: Buffer) => void): Buffer => {
      const file = parseFile(source);
      const section = file.sections.find((s) => s.kind === kind && s.order === order)!;
      change(section.bytes);
      return buildFile(file);
    };
    // Children: not ascending, and not ending at the next order's row count.
    await expectCorrupt(rewrite(floatFile, 9, 1, (b) => b.writeUInt32LE(b.readUInt32LE(8) + 1000, 4)), /children of order 1\): the children of row \d+ start before those of row \d+/);
    await expectCorrupt(rewrite(floatFile, 9, 1, (b) => b.writeUInt32LE(0xffffffff, 4)), /children of order 1\): the children of row 2 start before those of row 1/);
    await expectCorrupt(rewrite(floatFile, 9, 2, (b) => b.writeUInt32LE(b.readUInt32LE(b.length - 4) - 1, b.length - 4)), /children of order 2\): children must run from row 0 to the \d+ rows of order 3/);
    // Word ids: above V, not ascending within a context, <s>.
    await expectCorrupt(rewrite(floatFile, 6, 3, (b) => b.writeUInt16LE(60000, 0)), /word ids of order 3\): row 0: word id 60000 above V/);
    await expectCorrupt(rewrite(floatFile, 6, 2, (b) => b.writeUInt16LE(0, 0)), /word ids of order 2\): row 0: word id 0 does not ascend within its context \(or is <s>\)/);
    // Codes outside the codebook.
    await expectCorrupt(rewrite(quantisedFile, 7, 2, (b) => (b[3] = 255)), /log10 probabilities of order 2\): code 255 is outside its codebook/);
    // Vocabulary: markers, offsets, hash table.
    await expectCorrupt(rewrite(floatFile, 3, 0, (b) => b.write('<S>', 0)), /vocabulary words\): ids 0, \d+ and \d+ must be <s>, <\/s> and <unk>/);
    await expectCorrupt(rewrite(floatFile, 4, 0, (b) => b.writeUInt32LE(1, 0)), /vocabulary offsets\): offsets must run from 0/);
    await expectCorrupt(rewrite(floatFile, 5, 0, (b) => {
      const slot = b.findIndex((_, i) => i % 4 === 0 && b.readUInt32LE(i) !== 0);
      b.writeUInt32LE(0, slot);
    }), /vocabulary hash\): \d+ slots are filled/);
    // Description: not JSON; wrong cutoffs.
    await expectCorrupt(rewrite(floatFile, 1, 0, (b) => (b[0] = 0x20 + 1)), /description\): not valid UTF-8 JSON/);
    const file = parseFile(floatFile);
    const description = file.sections[0];
    const json = JSON.parse(description.bytes.toString('utf8'));
    json.cutoffs = [1, 1];
    description.bytes = Buffer.from(JSON.stringify(json));
    await expectCorrupt(buildFile(file), /description\): the cutoffs must be 3 integers ≥ 1/);
  });

  test('with the structure check turned off, a crafted file opens and lookups stay bounded; toLanguageModel checks first', async () => {
    const file = parseFile(floatFile);
    const children = file.sections.find((s) => s.kind === 9 && s.order === 1)!;
    children.bytes.writeUInt32LE(0xfffffff0, 8);
    const path = join(dir, 'crafted.qm');
    writeFileSync(path, buildFile(file));
    await expect(openModel(path)).rejects.toThrow(/children of order 1\): the children of row 3 start before those of row 2/);
    const model = await openModel(path, { checkStructure: false });
    for (const words of probe) model.scoreSentence(words); // wrong numbers perhaps, but no crash or hang
    expect(() => model.toLanguageModel()).toThrow(/children of order 1\): the children of row 3 start before those of row 2/);
  });

  test('a file that does not exist is an io error', async () => {
    await expect(openModel(join(dir, 'missing.qm'))).rejects.toMatchObject({ code: 'io' });
  });
});

describe('fuzz', () => {
  test('1,200 seeded mutations (bit flips, truncations, appended bytes, overwritten offset, length and count fields): every changed file is refused as corrupt, every unchanged one answers as before', async () => {
    const random = seededRandom(2024);
    const pick = (n: number): number => Math.floor(random() * n);
    const expected = new Map<Buffer, number[]>();
    for (const original of [floatFile, quantisedFile]) expected.set(original, scores((await tryOpen(original)).model as PackedModel));
    const kinds = new Map<string, number>();
    let refused = 0;
    let unchanged = 0;
    for (let trial = 0; trial < 1200; trial++) {
      const original = trial % 3 === 2 ? quantisedFile : floatFile;
      let bytes = Buffer.from(original);
      const sectionCount = original.readUInt32LE(56);
      const kind = ['flip', 'flips', 'truncate', 'append', 'table-field', 'table-field-resealed', 'header-field-resealed'][pick(7)];
      kinds.set(kind, (kinds.get(kind) ?? 0) + 1);
      switch (kind) {
        case 'flip':
          bytes[pick(bytes.length)] ^= 1 << pick(8);
          break;
        case 'flips':
          for (let i = 1 + pick(8); i > 0; i--) bytes[pick(bytes.length)] = pick(256);
          break;
        case 'truncate':
          bytes = bytes.subarray(0, pick(bytes.length));
          break;
        case 'append':
          bytes = Buffer.concat([bytes, Buffer.alloc(1 + pick(16), pick(256))]);
          break;
        case 'table-field':
        case 'table-field-resealed': {
          // An offset or a length of a random section: a random value, near the old one, or far past the end.
          const field = 128 + 32 * pick(sectionCount) + (random() < 0.5 ? 8 : 16);
          const old = bytes.readBigUInt64LE(field);
          const choice = pick(3);
          const value = choice === 0 ? BigInt(pick(2 ** 31)) : choice === 1 ? old + BigInt(pick(17) - 8) : BigInt(original.length) + BigInt(pick(2 ** 30));
          bytes.writeBigUInt64LE(value < 0n ? 0n : value, field);
          if (kind === 'table-field-resealed') resealTable(bytes);
          break;
        }
        case 'header-field-resealed': {
          // Counts, file size, order, vocabulary size, section count, encoding, id width, with a fresh checksum.
          const fields: Array<[number, number]> = [[16, 8], [28, 4], [32, 4], [36, 4], [40, 4], [44, 1], [45, 1], [56, 4], [64 + 8 * pick(7), 8]];
          const [offset, size] = fields[pick(fields.length)];
          if (size === 8) {
            const near = bytes.readBigUInt64LE(offset) + BigInt(pick(5) - 2);
            bytes.writeBigUInt64LE(random() < 0.5 ? BigInt(pick(2 ** 32)) : near < 0n ? 0n : near, offset);
          } else if (size === 4) bytes.writeUInt32LE(random() < 0.5 ? pick(2 ** 32) : Math.max(0, bytes.readUInt32LE(offset) + pick(5) - 2), offset);
          else bytes[offset] = pick(6);
          resealHeader(bytes);
          break;
        }
      }
      const started = performance.now();
      const { path, model, error } = await tryOpen(bytes);
      expect(performance.now() - started, `${kind}: no hang`).toBeLessThan(2000);
      if (bytes.equals(original)) {
        unchanged++;
        expect(error, `${kind}: an unchanged file opens`).toBeUndefined();
        expect(scores(model as PackedModel)).toEqual(expected.get(original));
        continue;
      }
      if (model !== undefined) throw new Error(`trial ${trial} (${kind}): a changed file opened`);
      if (!(error instanceof QuernError && error.code === 'corrupt' && error.message.startsWith(`${path}: `))) throw error;
      refused++;
    }
    expect(refused + unchanged).toBe(1200);
    expect(refused).toBeGreaterThan(1100);
    for (const count of kinds.values()) expect(count).toBeGreaterThan(100);
  });
});

test('checksums are CRC-32 (IEEE): the check value of "123456789" is 0xCBF43926 (the CRC catalogue\'s check value)', () => {
  expect(crc32(Buffer.from('123456789'))).toBe(0xcbf43926);
});
