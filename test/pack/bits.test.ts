/**
 * Packed integers (docs/model-file.md, "Packed integers"): what BitPacker writes and `unpack` reads
 * is the bit stream the spec describes, read here bit by bit (readPacked), for every width 0..32;
 * the length is P(count, b) and every bit after the values is zero.
 */
import { expect, test } from 'vitest';
import { BitPacker, maskFor, unpack } from '../../src/pack/bits.ts';
import { bitsFor, packedBytes } from '../../src/pack/format.ts';
import { seededRandom } from '../support/seeded.ts';
import { readPacked } from './support.ts';

test('every width 0..32, several counts, packed in pieces: the spec\'s bit stream, its length, zero padding', () => {
  const random = seededRandom(11);
  for (let bits = 0; bits <= 32; bits++) {
    for (const count of [0, 1, 2, 31, 32, 33, 63, 64, 65, 500]) {
      const values = Array.from({ length: count }, () => Math.floor(random() * 2 ** bits));
      if (count > 0 && bits > 0) values[count - 1] = 2 ** bits - 1; // the largest value, at the end
      const packer = new BitPacker(bits, 4);
      const pieces: Uint8Array[] = [];
      values.forEach((value, i) => {
        packer.push(value);
        if (i % 7 === 0) pieces.push(packer.take());
      });
      pieces.push(packer.finish());
      const bytes = Buffer.concat(pieces);
      expect(bytes.length, `${count} values of ${bits} bits`).toBe(packedBytes(count, bits));
      expect(bytes.length % 8).toBe(0);
      const words = new Uint32Array(bytes.buffer, bytes.byteOffset, bytes.length / 4);
      values.forEach((value, i) => {
        if (readPacked(bytes, 0, i, bits) !== value || unpack(words, i, bits, maskFor(bits)) !== value) {
          expect([readPacked(bytes, 0, i, bits), unpack(words, i, bits, maskFor(bits))], `value ${i} of ${count}, ${bits} bits`).toEqual([value, value]);
        }
      });
      for (let bit = count * bits; bit < bytes.length * 8; bit++) if ((bytes[bit >> 3] & (1 << (bit & 7))) !== 0) expect(bit, 'padding bit').toBe(-1);
    }
  }
});

test('bits(x): 0 for 0, else ⌊log2 x⌋ + 1', () => {
  expect([0, 1, 2, 3, 4, 7, 8, 65535, 65536, 2 ** 32 - 1].map(bitsFor)).toEqual([0, 1, 2, 2, 3, 3, 4, 16, 17, 32]);
});

test('a value that does not fit its width is a programmer error', () => {
  expect(() => new BitPacker(3).push(8)).toThrow(/fits 3 bits/);
  expect(() => new BitPacker(33)).toThrow(/0\.\.32 bits/);
});
