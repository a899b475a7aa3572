/**
 * What the byte tokenizer counts as white space, by byte: the classes of single bytes and the
 * multi-byte white-space characters. Shared by scanLines (byte-tokenizer.ts) and the WebAssembly
 * scan (word-memory.ts writes BYTE_CLASS into its memory; word-scan.as.ts has multiByteSpaceWidth's
 * twin), so that both split text alike.
 */

export const WORD = 0;
export const SPACE = 1;
export const NEWLINE = 2;
/** Lead byte of a multi-byte white-space character (C2, E1, E2, E3, EF), or of another character. */
export const MAYBE_SPACE = 3;

/** The class of each byte value. */
export const BYTE_CLASS = new Uint8Array(256);
for (const b of [0x09, 0x0b, 0x0c, 0x0d, 0x20]) BYTE_CLASS[b] = SPACE;
BYTE_CLASS[0x0a] = NEWLINE;
for (const b of [0xc2, 0xe1, 0xe2, 0xe3, 0xef]) BYTE_CLASS[b] = MAYBE_SPACE;

/**
 * Width in bytes of the multi-byte white-space character starting at bytes[p], or 0 when the
 * character there is not white space. bytes[p .. end) must be valid UTF-8.
 */
export function multiByteSpaceWidth(bytes: Uint8Array, p: number, end: number): number {
  const b0 = bytes[p];
  if (b0 === 0xc2) return p + 1 < end && bytes[p + 1] === 0xa0 ? 2 : 0; // U+00A0
  if (p + 2 >= end) return 0;
  const b1 = bytes[p + 1];
  const b2 = bytes[p + 2];
  switch (b0) {
    case 0xe1: // U+1680
      return b1 === 0x9a && b2 === 0x80 ? 3 : 0;
    case 0xe2: // U+2000–U+200A, U+2028, U+2029, U+202F (E2 80 xx); U+205F (E2 81 9F)
      if (b1 === 0x80) return b2 <= 0x8a || b2 === 0xa8 || b2 === 0xa9 || b2 === 0xaf ? 3 : 0;
      return b1 === 0x81 && b2 === 0x9f ? 3 : 0;
    case 0xe3: // U+3000
      return b1 === 0x80 && b2 === 0x80 ? 3 : 0;
    case 0xef: // U+FEFF
      return b1 === 0xbb && b2 === 0xbf ? 3 : 0;
    default:
      return 0;
  }
}
