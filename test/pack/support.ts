/**
 * Shared by the pack tests: temporary directories, the Brown corpus reader, a comparison of a packed
 * model with the in-memory lookup, and a small editor of model files that rewrites the header and
 * section table and footer with fresh checksums (to build files that are damaged only where a test wants).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { crc32 } from 'node:zlib';
import { expect } from 'vitest';
import { BOS_ID } from '../../src/corpus/vocabulary.ts';
import { logProb, type LanguageModel } from '../../src/estimate/model.ts';
import type { PackedModel } from '../../src/pack/reader.ts';

/** A fresh temporary directory, and a function that removes it. */
export function temporaryDirectory(prefix: string): { dir: string; remove: () => void } {
  const dir = mkdtempSync(join(tmpdir(), `quern-${prefix}-`));
  return { dir, remove: () => rmSync(dir, { recursive: true, force: true }) };
}

export { BROWN_DIR, brownFiles, readBrown } from '../support/brown.ts';

/**
 * Walks `sentences` (word ids, OOVs as `<unk>`) with the packed model's states (`advance`, and
 * `step` on one reused state) and its stateless lookup and compares all three with the in-memory
 * `logProb` at every token: equal orders, log10 probabilities within `tolerance`·max(1, |log10 p|)
 * (−∞ equal). Returns the tokens compared.
 */
export function compareAlongSentences(model: LanguageModel, packed: PackedModel, sentences: number[][], tolerance: number): number {
  let tokens = 0;
  const reused = packed.newState();
  for (const sentence of sentences) {
    const wrapped = [BOS_ID, ...sentence, model.vocabulary.eosId];
    let state = packed.beginState();
    packed.resetState(reused);
    for (let i = 1; i < wrapped.length; i++) {
      const history = wrapped.slice(0, i);
      const expected = logProb(model, history, wrapped[i]);
      const stateless = packed.logProb(history, wrapped[i]);
      const advanced = packed.advance(state, wrapped[i]);
      state = advanced.state;
      const stepped = { log10Prob: packed.step(reused, wrapped[i]), order: reused.order };
      const kept = wrapped.slice(Math.max(0, i + 1 - (model.order - 1)), i + 1);
      if (state.history.length !== kept.length || state.history.some((id, j) => id !== kept[j])) expect(state.history).toEqual(kept);
      if (reused.history.length !== kept.length || reused.history.some((id, j) => id !== kept[j])) expect(reused.history).toEqual(kept);
      for (const found of [stateless, advanced, stepped]) {
        if (found.order !== expected.order) expect(found.order, `order of token ${i} of [${wrapped.join(' ')}]`).toBe(expected.order);
        expectClose(found.log10Prob, expected.log10Prob, tolerance);
      }
      tokens++;
    }
  }
  return tokens;
}

/** |actual − expected| ≤ tolerance·max(1, |expected|), or both −∞. */
export function expectClose(actual: number, expected: number, tolerance: number): void {
  if (expected === -Infinity || actual === -Infinity) {
    if (actual !== expected) expect(actual).toBe(expected);
    return;
  }
  const bound = tolerance * Math.max(1, Math.abs(expected));
  if (!(Math.abs(actual - expected) <= bound)) expect(actual, `within ${bound} of ${expected}`).toBe(expected);
}

/** One section of a model file, as the editor sees it. */
export interface EditableSection {
  kind: number;
  order: number;
  bytes: Buffer;
}

/** A model file taken apart: the header bytes and the sections (docs/model-file.md). */
export interface EditableFile {
  header: Buffer;
  sections: EditableSection[];
}

/** Where the section table is and how many entries it has (docs/model-file.md, "Footer"). */
export function footerOf(bytes: Buffer): { tableOffset: number; sectionCount: number } {
  const footer = bytes.length - 32;
  return { tableOffset: Number(bytes.readBigUInt64LE(footer)), sectionCount: bytes.readUInt32LE(footer + 8) };
}

/** Takes a valid model file apart. */
export function parseFile(bytes: Buffer): EditableFile {
  const header = Buffer.from(bytes.subarray(0, 128));
  const { tableOffset, sectionCount } = footerOf(bytes);
  const sections: EditableSection[] = [];
  for (let i = 0; i < sectionCount; i++) {
    const entry = tableOffset + 32 * i;
    const offset = Number(bytes.readBigUInt64LE(entry + 8));
    const length = Number(bytes.readBigUInt64LE(entry + 16));
    sections.push({ kind: bytes.readUInt32LE(entry), order: bytes.readUInt32LE(entry + 4), bytes: Buffer.from(bytes.subarray(offset, offset + length)) });
  }
  return { header, sections };
}

/** Lays a model file out again with correct offsets, sizes and checksums everywhere. */
export function buildFile(file: EditableFile): Buffer {
  const table = Buffer.alloc(32 * file.sections.length);
  let offset = 128;
  const parts: Buffer[] = [];
  file.sections.forEach((section, i) => {
    table.writeUInt32LE(section.kind, 32 * i);
    table.writeUInt32LE(section.order, 32 * i + 4);
    table.writeBigUInt64LE(BigInt(offset), 32 * i + 8);
    table.writeBigUInt64LE(BigInt(section.bytes.length), 32 * i + 16);
    table.writeUInt32LE(crc32(section.bytes), 32 * i + 24);
    const padded = Math.ceil(section.bytes.length / 8) * 8;
    parts.push(section.bytes, Buffer.alloc(padded - section.bytes.length));
    offset += padded;
  });
  const header = Buffer.from(file.header);
  header.writeUInt32LE(crc32(header.subarray(0, 124)), 124);
  const footer = Buffer.alloc(32);
  footer.writeBigUInt64LE(BigInt(offset), 0);
  footer.writeUInt32LE(file.sections.length, 8);
  footer.writeUInt32LE(crc32(table), 12);
  footer.writeBigUInt64LE(BigInt(offset + table.length + 32), 16);
  footer.writeUInt32LE(crc32(footer.subarray(0, 28)), 28);
  return Buffer.concat([header, ...parts, table, footer]);
}

/** Recomputes the header checksum of a file in place (after a test changed a header field). */
export function resealHeader(bytes: Buffer): void {
  bytes.writeUInt32LE(crc32(bytes.subarray(0, 124)), 124);
}

/** Recomputes the footer checksum in place (after a test changed a footer field). */
export function resealFooter(bytes: Buffer): void {
  const footer = bytes.length - 32;
  bytes.writeUInt32LE(crc32(bytes.subarray(footer, footer + 28)), footer + 28);
}

/** Recomputes the section-table checksum in the footer, then the footer checksum, in place. */
export function resealTable(bytes: Buffer): void {
  const { tableOffset, sectionCount } = footerOf(bytes);
  bytes.writeUInt32LE(crc32(bytes.subarray(tableOffset, tableOffset + 32 * sectionCount)), bytes.length - 32 + 12);
  resealFooter(bytes);
}

/** Value `index` of a packed array of `bits`-bit values that starts at byte `start` of `bytes`, read
 *  bit by bit as docs/model-file.md ("Packed integers") words it: stream bit i is bit i mod 8 of
 *  byte ⌊i/8⌋, values least significant bit first. */
export function readPacked(bytes: Uint8Array, start: number, index: number, bits: number): number {
  let value = 0;
  for (let i = 0; i < bits; i++) {
    const bit = index * bits + i;
    if ((bytes[start + Math.floor(bit / 8)] & (1 << (bit % 8))) !== 0) value += 2 ** i;
  }
  return value;
}

/** Writes value `index` of a packed array (see readPacked). */
export function writePacked(bytes: Uint8Array, start: number, index: number, bits: number, value: number): void {
  for (let i = 0; i < bits; i++) {
    const bit = index * bits + i;
    const at = start + Math.floor(bit / 8);
    if (Math.floor(value / 2 ** i) % 2 === 1) bytes[at] |= 1 << (bit % 8);
    else bytes[at] &= ~(1 << (bit % 8));
  }
}

/** Where the parts of a children section of an order of `rows` rows lie (docs/model-file.md, "Children"). */
export function childrenLayout(section: Buffer, rows: number): { bits: number; bases: number; offsets: number } {
  return { bits: section.readUInt32LE(0), bases: 8, offsets: Math.ceil((8 + 4 * (Math.floor(rows / 64) + 1)) / 8) * 8 };
}
