/**
 * What the byte tokenizer counts as white space, by byte value: one table for scanLines
 * (byte-tokenizer.ts, which also recognises the multi-byte white space, `multiByteSpaceWidth`) and
 * for the WebAssembly scan (word-memory.ts writes it into its memory; word-scan.as.ts), so that both
 * split text alike.
 */

/**
 * A fresh table of each byte's class: 0 part of a word; 1 white space (TAB, VT, FF, CR, SPACE);
 * 2 '\n'; 3 the lead byte of a multi-byte white-space character (C2, E1, E2, E3, EF), or of another
 * character that begins like one.
 */
export function byteClasses(): Uint8Array {
  const classes = new Uint8Array(256);
  for (const b of [0x09, 0x0b, 0x0c, 0x0d, 0x20]) classes[b] = 1;
  classes[0x0a] = 2;
  for (const b of [0xc2, 0xe1, 0xe2, 0xe3, 0xef]) classes[b] = 3;
  return classes;
}
