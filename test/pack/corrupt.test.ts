/**
 * Damaged model files: truncated, wrong magic or version, flipped bytes, offsets and lengths past
 * the end, structure that checksums cannot vouch for. Each must be a QuernError 'corrupt' naming the
 * file and the section — never a crash, a hang or a huge allocation — and a seeded fuzz test checks
 * that every changed file is refused while every unchanged one opens and answers as before. Damage
 * behind valid checksums is refused with the structure check (`checkStructure: true`, `quern info
 * --check`); without it (the default) such a file may open, and its lookups must stay bounded:
 * finite numbers (wrong perhaps), no crash, no hang (docs/model-file.md, "What a reader checks").
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
import { buildFile, childrenLayout, footerOf, parseFile, readPacked, resealFooter, resealHeader, resealTable, temporaryDirectory, writePacked } from './support.ts';

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
async function tryOpen(bytes: Uint8Array, checkStructure = false): Promise<{ path: string; model?: PackedModel; error?: unknown }> {
  const path = join(dir, `case-${caseIndex++}.qm`);
  writeFileSync(path, bytes);
  try {
    return { path, model: await openModel(path, { checkStructure }) };
  } catch (error) {
    return { path, error };
  }
}

/** Opens `bytes` and expects a corrupt-file error whose message names the file and matches `pattern`. */
async function expectCorrupt(bytes: Uint8Array, pattern: RegExp, checkStructure = false): Promise<string> {
  const { path, model, error } = await tryOpen(bytes, checkStructure);
  expect(model, 'the damaged file must not open').toBeUndefined();
  expect(error).toBeInstanceOf(QuernError);
  expect((error as QuernError).code).toBe('corrupt');
  const message = (error as Error).message;
  expect(message.startsWith(`${path}: `), message).toBe(true);
  expect(message, message).toMatch(pattern);
  return message;
}

function scores(model: PackedModel): number[] {
  return probe.map((words) => model.scoreSentence(words).log10ProbWithUnk);
}

/** Every lookup of the probe text answers a finite number (or −∞, a stored probability 0): bounded. */
/** Every token's log10 p and answering order over the probe text. */
function allScores(model: PackedModel): Array<[number, number]> {
  return probe.flatMap((words) => model.scoreSentence(words).tokens.map((token): [number, number] => [token.log10Prob, token.order]));
}

function expectBoundedLookups(model: PackedModel): void {
  for (const words of probe) {
    for (const token of model.scoreSentence(words).tokens) {
      if (!(Number.isFinite(token.log10Prob) || token.log10Prob === -Infinity)) throw new Error(`lookup of ${token.word} gave ${token.log10Prob}`);
    }
  }
}

describe('damaged files are refused with a corrupt-file error naming the file and the section', () => {
  test('truncated anywhere; extended', async () => {
    for (const length of [0, 5, 8, 64, 127, 128, 159, 200, floatFile.length >> 1, floatFile.length - 8, floatFile.length - 1]) {
      await expectCorrupt(floatFile.subarray(0, length), /header: (not a Quern model file|the file is \d+ bytes, shorter than the 128-byte header)|footer: (the file is \d+ bytes, shorter than the 128-byte header and the 32-byte footer|checksum mismatch .*: the file was truncated, extended or damaged at its end)/);
    }
    await expectCorrupt(Buffer.concat([floatFile, Buffer.alloc(8)]), /footer: checksum mismatch .*: the file was truncated, extended or damaged at its end/);
    // A whole valid footer appended: its checksum holds, its size does not.
    await expectCorrupt(Buffer.concat([floatFile, floatFile.subarray(floatFile.length - 32)]), /footer: the file is \d+ bytes but its footer says \d+: it was extended/);
    // Cut at a section boundary and given a footer that matches the shorter file: the table is gone.
    const cut = Buffer.concat([floatFile.subarray(0, footerOf(floatFile).tableOffset), floatFile.subarray(floatFile.length - 32)]);
    cut.writeBigUInt64LE(BigInt(cut.length), cut.length - 32 + 16);
    resealFooter(cut);
    await expectCorrupt(cut, /footer: the section table of \d+ entries is at byte \d+; it must end where the footer starts/);
  });

  test('wrong magic; another major version (older or newer); a newer minor version opens', async () => {
    const magic = Buffer.from(floatFile);
    magic.write('QRNRUN\u0001\u0000', 0, 'latin1');
    await expectCorrupt(magic, /header: not a Quern model file/);
    for (const [major, what] of [[3, 'a newer Quern wrote it'], [1, 'an older Quern wrote it; repack the model'], [0, 'an older Quern wrote it']] as const) {
      const other = Buffer.from(floatFile);
      other.writeUInt16LE(major, 8);
      resealHeader(other);
      const message = await expectCorrupt(other, /header: format version \d\.0; this reader reads version 2\.x/);
      expect(message).toContain(what);
    }
    // Version 2.1 with a section kind this reader does not know: skipped (after its checksum).
    const file = parseFile(floatFile);
    file.header.writeUInt16LE(1, 10);
    file.sections.splice(3, 0, { kind: 99, order: 0, bytes: Buffer.from('a section from the future') });
    const newer = await tryOpen(buildFile(file));
    expect(newer.error).toBeUndefined();
    expect(scores(newer.model as PackedModel)).toEqual(scores((await tryOpen(floatFile)).model as PackedModel));
    expect(newer.model?.version).toEqual({ major: 2, minor: 1 });
    // The same unknown kind in a 2.0 file is damage.
    file.header.writeUInt16LE(0, 10);
    await expectCorrupt(buildFile(file), /section 3 \(section kind 99\): unknown section kind 99 in a version 2\.0 file/);
  });

  test('a flipped byte in the header, the section table, each section or the padding', async () => {
    const flip = (offset: number): Buffer => {
      const bytes = Buffer.from(floatFile);
      bytes[offset] ^= 0x10;
      return bytes;
    };
    await expectCorrupt(flip(30), /header: checksum mismatch/);
    await expectCorrupt(flip(126), /header: checksum mismatch/);
    await expectCorrupt(flip(footerOf(floatFile).tableOffset + 5), /section table: checksum mismatch/);
    await expectCorrupt(flip(floatFile.length - 20), /footer: checksum mismatch/);
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
    const { tableOffset, sectionCount } = footerOf(floatFile);
    const footer = floatFile.length - 32;
    const entry = (index: number): number => tableOffset + 32 * index;
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(BigInt(floatFile.length + 8), entry(4) + 8), resealTable), /section 4 \(vocabulary hash\): starts at byte \d+; .* must start at byte \d+/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(2n ** 40n, entry(0) + 16), resealTable), /section 0 \(description\): 1099511627776 bytes at byte \d+ run past the start of the section table/);
    const last = sectionCount - 1;
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(b.readBigUInt64LE(entry(last) + 16) + 64n, entry(last) + 16), resealTable), /run past the start of the section table/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(2n ** 63n, entry(2) + 8), resealTable), /section 2 \(vocabulary words\): starts at byte/);
    await expectCorrupt(edit((b) => b.writeUInt32LE(1000, footer + 8), resealFooter), /footer: section count 1000 outside \[1, 64\]/);
    await expectCorrupt(edit((b) => b.writeUInt32LE(sectionCount - 1, footer + 8), resealFooter), /footer: the section table of \d+ entries is at byte \d+; it must end where the footer starts/);
    await expectCorrupt(edit((b) => b.writeUInt32LE((b.readUInt32LE(footer + 12) ^ 1) >>> 0, footer + 12), resealFooter), /section table: checksum mismatch/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(2n ** 60n, 64 + 8 * 2), resealHeader), /header: \d+ n-grams of order 3, over the limit/);
    await expectCorrupt(edit((b) => b.writeBigUInt64LE(b.readBigUInt64LE(64 + 8) + 40n, 64 + 8), resealHeader), /(word ids|log10 probabilities) of order 2\): is \d+ bytes; the header's counts require \d+/);
    await expectCorrupt(edit((b) => b.writeUInt32LE(9, 28), resealHeader), /header: order 9 outside \[1, 7\]/);
    await expectCorrupt(edit((b) => (b[45] += 1), resealHeader), /header: word ids of \d+ bits; a vocabulary of \d+ takes \d+/);
    await expectCorrupt(edit((b) => (b[17] = 1), resealHeader), /header: reserved bytes are not zero/);
  });

  test('structure the checksums cannot vouch for (a file rewritten with fresh checksums)', async () => {
    const rewrite = (source: Buffer, kind: number, order: number, change: (bytes: Buffer) => void): Buffer => {
      const file = parseFile(source);
      const section = file.sections.find((s) => s.kind === kind && s.order === order)!;
      change(section.bytes);
      return buildFile(file);
    };
    const rows = (order: number): number => Number(floatFile.readBigUInt64LE(64 + 8 * (order - 1)));
    const size = floatFile.readUInt32LE(32);
    const wordBits = floatFile[45];
    /** Changes offset `index` of the children of `order` (a packed value) with `change`. */
    const offset = (order: number, index: number, change: (old: number, next: number) => number) => (b: Buffer): void => {
      const layout = childrenLayout(b, rows(order));
      const next = index < rows(order) ? readPacked(b, layout.offsets, index + 1, layout.bits) : 0;
      writePacked(b, layout.offsets, index, layout.bits, change(readPacked(b, layout.offsets, index, layout.bits), next));
    };
    // Children: a block's first offset not 0, not ascending, not ending at the next order's rows, too wide.
    await expectCorrupt(rewrite(floatFile, 9, 2, offset(2, 0, () => 1)), /children of order 2\): the offset of row 0, the first of its block, is 1, not 0/, true);
    await expectCorrupt(rewrite(floatFile, 9, 1, offset(1, 2, (_, next) => next + 1)), /children of order 1\): the children of row 3 start before those of row 2/, true);
    await expectCorrupt(rewrite(floatFile, 9, 2, offset(2, rows(2), (old) => old - 1)), /children of order 2\): children must run from row 0 to the \d+ rows of the next order/, true);
    await expectCorrupt(rewrite(floatFile, 9, 2, (b) => b.writeUInt32LE(33, 0)), /children of order 2\): offset width 33 bits/);
    await expectCorrupt(rewrite(floatFile, 9, 2, (b) => (b[b.length - 1] = 1)), /children of order 2\): the bits after the last offset are not zero/);
    // Word ids: above V, not ascending within a context, <s>; padding bits.
    expect(2 ** wordBits - 1).toBeGreaterThan(size);
    await expectCorrupt(rewrite(floatFile, 6, 3, (b) => writePacked(b, 0, 0, wordBits, size + 1)), new RegExp(`word ids of order 3\\): row 0: word id ${size + 1} above V`), true);
    await expectCorrupt(rewrite(floatFile, 6, 2, (b) => writePacked(b, 0, 0, wordBits, 0)), /word ids of order 2\): row 0: word id 0 does not ascend within its context \(or is <s>\)/, true);
    await expectCorrupt(rewrite(floatFile, 6, 2, (b) => writePacked(b, 0, 1, wordBits, readPacked(b, 0, 0, wordBits))), /word ids of order 2\): row 1: word id \d+ does not ascend/, true);
    await expectCorrupt(rewrite(floatFile, 6, 2, (b) => (b[b.length - 1] = 0x80)), /word ids of order 2\): the bits after the last word id are not zero/);
    // Codes outside the codebook.
    await expectCorrupt(rewrite(quantisedFile, 7, 2, (b) => (b[3] = 255)), /log10 probabilities of order 2\): code 255 is outside its codebook/, true);
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

  test('without the structure check (the default), a crafted file opens and lookups stay bounded; toLanguageModel checks first', async () => {
    const file = parseFile(floatFile);
    const children = file.sections.find((s) => s.kind === 9 && s.order === 1)!;
    const layout = childrenLayout(children.bytes, floatFile.readUInt32LE(32) + 1);
    writePacked(children.bytes, layout.offsets, 2, layout.bits, readPacked(children.bytes, layout.offsets, 3, layout.bits) + 1);
    // And a context of order 2 whose children run far past the rows of order 3 (the clamp's case).
    const second = file.sections.find((s) => s.kind === 9 && s.order === 2)!;
    const rows2 = Number(floatFile.readBigUInt64LE(64 + 8));
    expect(rows2).toBeGreaterThan(64);
    second.bytes.writeUInt32LE(0xffffff00, childrenLayout(second.bytes, rows2).bases + 4); // base of block 1: rows 64.. start far past the end
    const path = join(dir, 'crafted.qm');
    writeFileSync(path, buildFile(file));
    await expect(openModel(path, { checkStructure: true })).rejects.toThrow(/children of order 1\): the children of row 3 start before those of row 2/);
    const model = await openModel(path);
    expect(model.structureChecked).toBe(false);
    expectBoundedLookups(model); // wrong numbers perhaps, but no crash, hang or read outside an array
    // The searches stay inside the next order's rows: every children range a state keeps is clamped.
    const state = model.newState();
    let clamped = 0;
    for (const words of probe) {
      model.resetState(state);
      for (const word of [...words, '</s>']) {
        const id = model.wordId(word);
        model.step(state, id > 0 ? id : model.unkId);
        for (let k = 1; k <= state.length; k++) {
          if (state.rows[k] < 0) continue;
          expect(state.starts[k]).toBeGreaterThanOrEqual(0);
          expect(state.ends[k]).toBeLessThanOrEqual(model.ngrams[k]);
          if (state.ends[k] === model.ngrams[k] && state.starts[k] === model.ngrams[k]) clamped++;
        }
      }
    }
    expect(clamped, 'the probe reaches a context whose children were moved past the end').toBeGreaterThan(0);
    expect(() => model.toLanguageModel()).toThrow(/children of order 1\): the children of row 3 start before those of row 2/);
  });

  test('codes outside their codebook, behind valid checksums: refused with the structure check, bounded without it', async () => {
    const file = parseFile(quantisedFile);
    for (const section of file.sections) if (section.kind === 7 || section.kind === 8) section.bytes.fill(255);
    const crafted = buildFile(file);
    await expectCorrupt(crafted, /code 255 is outside its codebook/, true);
    const { model, error } = await tryOpen(crafted);
    expect(error).toBeUndefined();
    expectBoundedLookups(model as PackedModel);
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
      const { tableOffset, sectionCount } = footerOf(original);
      const kind = ['flip', 'flips', 'truncate', 'append', 'table-field', 'table-field-resealed', 'header-field-resealed', 'footer-field-resealed'][pick(8)];
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
          const field = tableOffset + 32 * pick(sectionCount) + (random() < 0.5 ? 8 : 16);
          const old = bytes.readBigUInt64LE(field);
          const choice = pick(3);
          const value = choice === 0 ? BigInt(pick(2 ** 31)) : choice === 1 ? old + BigInt(pick(17) - 8) : BigInt(original.length) + BigInt(pick(2 ** 30));
          bytes.writeBigUInt64LE(value < 0n ? 0n : value, field);
          if (kind === 'table-field-resealed') resealTable(bytes);
          break;
        }
        case 'header-field-resealed': {
          // Counts, reserved fields, order, vocabulary size, marker ids, encoding, id width, with a fresh checksum.
          const fields: Array<[number, number]> = [[16, 8], [28, 4], [32, 4], [36, 4], [40, 4], [44, 1], [45, 1], [56, 8], [64 + 8 * pick(7), 8]];
          const [offset, size] = fields[pick(fields.length)];
          if (size === 8) {
            const near = bytes.readBigUInt64LE(offset) + BigInt(pick(5) - 2);
            bytes.writeBigUInt64LE(random() < 0.5 ? BigInt(pick(2 ** 32)) : near < 0n ? 0n : near, offset);
          } else if (size === 4) bytes.writeUInt32LE(random() < 0.5 ? pick(2 ** 32) : Math.max(0, bytes.readUInt32LE(offset) + pick(5) - 2), offset);
          else bytes[offset] = pick(6);
          resealHeader(bytes);
          break;
        }
        case 'footer-field-resealed': {
          // Table offset, section count, table checksum, file size, reserved, with a fresh footer checksum.
          const footer = bytes.length - 32;
          const [offset, size] = ([[0, 8], [8, 4], [12, 4], [16, 8], [24, 4]] as Array<[number, number]>)[pick(5)];
          if (size === 8) {
            const near = bytes.readBigUInt64LE(footer + offset) + BigInt(pick(17) - 8);
            bytes.writeBigUInt64LE(random() < 0.5 ? BigInt(pick(2 ** 32)) : near < 0n ? 0n : near, footer + offset);
          } else bytes.writeUInt32LE(random() < 0.5 ? pick(2 ** 32) : Math.max(0, bytes.readUInt32LE(footer + offset) + pick(5) - 2), footer + offset);
          resealFooter(bytes);
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

describe('fuzz of the bit-packed structure and the values, behind fresh checksums', () => {
  /**
   * Seeded changes inside the word ids and children sections (and the codes of the 8-bit file),
   * each file rewritten with fresh checksums, opened with or without the structure check. Returns
   * how many were refused and how many opened; every open must succeed or fail as documented, and
   * every model that opens must answer every lookup of the probe text, bounded.
   */
  async function fuzz(seed: number, trials: number, checkStructure: boolean): Promise<{ refused: number; opened: number }> {
    const random = seededRandom(seed);
    const pick = (n: number): number => Math.floor(random() * n);
    let refused = 0;
    let opened = 0;
    for (let trial = 0; trial < trials; trial++) {
      const quantised = trial % 4 === 3;
      const file = parseFile(quantised ? quantisedFile : floatFile);
      const targets = file.sections.filter((section) => section.kind === 6 || section.kind === 9 || (quantised && (section.kind === 7 || section.kind === 8)));
      const bytes = targets[pick(targets.length)].bytes;
      const changes = 1 + pick(3);
      for (let i = 0; i < changes; i++) {
        const at = pick(bytes.length);
        if (random() < 0.5) bytes[at] ^= 1 << pick(8);
        else bytes[at] = pick(256);
      }
      const started = performance.now();
      const { path, model, error } = await tryOpen(buildFile(file), checkStructure);
      if (model !== undefined) {
        expect(model.engine).toBe('wasm');
        expectBoundedLookups(model);
        // The JavaScript lookups read the same arrays within the same bounds: the same numbers, also
        // where a crafted file makes them wrong.
        const js = await openModel(path, { checkStructure, engine: 'js' });
        expectBoundedLookups(js);
        expect(allScores(js)).toEqual(allScores(model));
        opened++;
      } else {
        if (!(error instanceof QuernError && error.code === 'corrupt' && error.message.startsWith(`${path}: `))) throw error;
        refused++;
      }
      expect(performance.now() - started, 'no hang').toBeLessThan(2000);
    }
    return { refused, opened };
  }

  test('1,000 seeded changes with the structure check: most are refused as corrupt, the rest (e.g. a word id changed to another that keeps its context ascending) answer every lookup, bounded', async () => {
    const { refused, opened } = await fuzz(2026, 1000, true);
    expect(refused + opened).toBe(1000);
    expect(refused).toBeGreaterThan(700);
  });

  test('1,000 seeded changes without it (the default open): each is refused as corrupt (padding bits, widths) or opens, and then answers every lookup, bounded', async () => {
    const { refused, opened } = await fuzz(2027, 1000, false);
    expect(refused + opened).toBe(1000);
    // The checksums match, so most open: the lookups' bounds, not the check, keep them safe.
    expect(opened).toBeGreaterThan(500);
  });
});

test('checksums are CRC-32 (IEEE): the check value of "123456789" is 0xCBF43926 (the CRC catalogue\'s check value)', () => {
  expect(crc32(Buffer.from('123456789'))).toBe(0xcbf43926);
});
