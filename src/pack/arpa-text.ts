/**
 * Writing ARPA text fast (arpa.ts, `writeArpaSource`): values formatted once per distinct value
 * (`Log10Texts`, a small cache: models repeat their values, quantised ones hold a few hundred per
 * order), and lines put together as bytes in a buffer (`TextOut`: words copied from their UTF-8
 * bytes, encoded once) rather than as strings joined and encoded per write.
 */
import { assert } from '../errors.ts';
import { ARPA_LOG10_ZERO, ARPA_SIGNIFICANT_DIGITS, ARPA_WRITE_BYTES } from '../limits.ts';

/** Characters of a formatted log10 value at most: a sign, "0.", up to 100 places (toFixed's
 *  limit) and a few to spare. */
export const LOG10_TEXT_MAX = 110;

/**
 * A log10 value as written: ARPA_SIGNIFICANT_DIGITS significant digits in plain decimal notation
 * (no exponent), trailing zeros dropped; −∞ as ARPA_LOG10_ZERO.
 */
export function formatLog10(value: number): string {
  if (value === -Infinity) return String(ARPA_LOG10_ZERO);
  if (!Number.isFinite(value)) assert(false, `a log10 value to write is finite or −∞ (got ${value})`);
  let text = value.toPrecision(ARPA_SIGNIFICANT_DIGITS);
  if (text.includes('e')) {
    const rounded = Number(text);
    const exponent = Math.floor(Math.log10(Math.abs(rounded)));
    text = rounded.toFixed(Math.min(100, Math.max(0, ARPA_SIGNIFICANT_DIGITS - 1 - exponent)));
  }
  if (text.includes('.')) {
    // Trailing zeros, then a trailing point.
    let end = text.length;
    while (text.charCodeAt(end - 1) === 0x30) end--;
    if (text.charCodeAt(end - 1) === 0x2e) end--;
    text = text.slice(0, end);
  }
  return text === '-0' ? '0' : text;
}

/** A vocabulary's words as UTF-8 bytes end to end: word `id` is bytes[starts[id], starts[id + 1]). */
export class WordArena {
  readonly bytes: Uint8Array;
  readonly starts: Int32Array;
  /** Bytes of the longest word. */
  readonly longest: number;

  constructor(words: readonly string[]) {
    const encoded = words.map((word) => Buffer.from(word, 'utf8'));
    this.starts = new Int32Array(words.length + 1);
    let at = 0;
    let longest = 0;
    encoded.forEach((bytes, id) => {
      this.starts[id] = at;
      at += bytes.length;
      longest = Math.max(longest, bytes.length);
    });
    this.starts[words.length] = at;
    this.bytes = new Uint8Array(at);
    encoded.forEach((bytes, id) => this.bytes.set(bytes, this.starts[id]));
    this.longest = longest;
  }
}

/** Entries of the cache of formatted values: 2^LOG10_TEXTS_SLOT_BITS. */
const LOG10_TEXTS_SLOT_BITS = 14;
const LOG10_TEXTS_SLOTS = 1 << LOG10_TEXTS_SLOT_BITS;

/** `formatLog10` with a direct-mapped cache keyed by the value's bits. */
export class Log10Texts {
  private readonly keys = new Float64Array(LOG10_TEXTS_SLOTS).fill(NaN);
  private readonly texts: string[] = new Array<string>(LOG10_TEXTS_SLOTS).fill('');
  private readonly scratch = new Float64Array(1);
  private readonly scratchBits = new Uint32Array(this.scratch.buffer);

  of(value: number): string {
    this.scratch[0] = value;
    const slot = Math.imul(this.scratchBits[0] ^ Math.imul(this.scratchBits[1], 0x85ebca6b), 0x9e3779b1) >>> (32 - LOG10_TEXTS_SLOT_BITS);
    // −0 and 0 share a key (===) and a text ('0'); NaN is never a key (formatLog10 refuses it).
    if (this.keys[slot] === value) return this.texts[slot];
    const text = formatLog10(value);
    this.keys[slot] = value;
    this.texts[slot] = text;
    return text;
  }
}

/**
 * Text put together as bytes in a buffer of ARPA_WRITE_BYTES, handed to `put` whole (a new buffer
 * follows, so the one handed over is never written again). `has` / `makeRoom` before each line
 * make room for it; the other methods do not check.
 */
export class TextOut {
  private buffer = Buffer.allocUnsafe(ARPA_WRITE_BYTES);
  private at = 0;

  constructor(private readonly put: (bytes: Buffer) => Promise<void>) {}

  /** Whether there is room for `bytes` more bytes (synchronous: a line costs no await). */
  has(bytes: number): boolean {
    return this.buffer.length - this.at >= bytes;
  }

  /** Makes room for `bytes` more bytes, writing out what is gathered. */
  async makeRoom(bytes: number): Promise<void> {
    await this.flush();
    if (this.buffer.length < bytes) this.buffer = Buffer.allocUnsafe(bytes);
  }

  /** Text of code points below 256 (values, markers). */
  latin1(text: string): void {
    this.at += this.buffer.write(text, this.at, 'latin1');
  }

  byte(value: number): void {
    this.buffer[this.at++] = value;
  }

  /** The bytes arena[start, end) (a word of `WordArena`). */
  bytes(arena: Uint8Array, start: number, end: number): void {
    const buffer = this.buffer;
    let at = this.at;
    for (let i = start; i < end; i++) buffer[at++] = arena[i];
    this.at = at;
  }

  /** Hands what is gathered to `put`. */
  async flush(): Promise<void> {
    if (this.at === 0) return;
    const full = this.buffer.subarray(0, this.at);
    this.buffer = Buffer.allocUnsafe(this.buffer.length);
    this.at = 0;
    await this.put(full);
  }
}
