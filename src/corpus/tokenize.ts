/**
 * Tokenizer: sentence text → tokens, after the chosen normalisation (README: "Normalisation").
 */
import { QuernError } from '../errors.ts';
import type { NormalizeOptions } from './types.ts';

/** Fills `out` (reused by the caller, truncated to the result) with the tokens of `sentence`; returns their count. */
export type Tokenizer = (sentence: string, out: string[]) => number;

/** The token that stands for an unknown word; also replaces literal sentence markers in text. */
export const UNKNOWN_TOKEN = '<unk>';

/**
 * Code points after which, or before which, a grapheme cluster may go on: combining marks, ZWJ and
 * ZWNJ, Thai/Lao AM and the Kirat Rai vowel signs (spacing marks that are letters), halfwidth
 * katakana sound marks, emoji modifiers, regional indicators (flags), tag characters, Hangul
 * conjoining jamo and the prepended concatenation marks. A sentence without them
 * has one grapheme per code point (apart from "\r\n", which is white space anyway); a test checks
 * this against Intl.Segmenter for every code point.
 */
const MAY_JOIN =
  /[\p{M}\u200c\u200d\u0e33\u0eb3\uff9e\uff9f\p{Emoji_Modifier}\p{Regional_Indicator}\u{e0000}-\u{e007f}\u1100-\u11ff\ua960-\ua97f\ud7b0-\ud7ff\u0600-\u0605\u06dd\u070f\u0890\u0891\u08e2\u0d4e\u{110bd}\u{110cd}\u{111c2}\u{111c3}\u{113d1}\u{1193f}\u{11941}\u{11a3a}\u{11a84}-\u{11a89}\u{11d46}\u{11f02}\u{16d63}\u{16d67}-\u{16d6a}]/u;

/**
 * True when `text` holds a code point that may join its neighbours into one grapheme cluster.
 * When false, 'chars' splitting goes by code point (the fast path).
 */
export function mayJoinCodePoints(text: string): boolean {
  return MAY_JOIN.test(text);
}

const ONLY_SPACE = /^\s*$/;

/**
 * Strings that a normalisation leaves unchanged, tested first because the test is several times
 * cheaper than String.prototype.normalize. Below U+0300 every character is NFC-stable and none
 * combines (combining marks start at U+0300); NFKC also changes Latin-1 characters such as
 * U+00A0, ª and ½, so only ASCII is known stable for it. A test checks both claims.
 */
const NFC_STABLE = /^[\u0000-\u02ff]*$/;
const NFKC_STABLE = /^[\u0000-\u007f]*$/;

/**
 * True for the code units of JavaScript's `\s` set: WhiteSpace and LineTerminator of ECMA-262
 * (tab, LF, VT, FF, CR, space, NBSP, U+1680, U+2000–U+200A, U+2028, U+2029, U+202F, U+205F,
 * U+3000, U+FEFF).
 */
export function isSpaceCode(code: number): boolean {
  if (code <= 0x20) return code === 0x20 || (code >= 0x09 && code <= 0x0d);
  if (code < 0xa0) return false;
  return (
    code === 0xa0 || code === 0x1680 || (code >= 0x2000 && code <= 0x200a) || code === 0x2028 || code === 0x2029 ||
    code === 0x202f || code === 0x205f || code === 0x3000 || code === 0xfeff
  );
}

/**
 * Makes a tokenizer for `options`. In order: Unicode normalisation (String.prototype.normalize
 * with NFC or NFKC, or none), lower-casing (String.prototype.toLowerCase, locale-independent),
 * splitting. 'space' splits on runs of white space (the JS `\s` set). 'chars' makes every grapheme
 * cluster that is not white space a token (by code point when the sentence has nothing that could
 * join code points, else with Intl.Segmenter).
 *
 * The sentence markers are reserved: a literal `<s>` or `</s>` token in the text (and `<unk>`
 * itself) becomes `<unk>`, so text can never forge a sentence boundary; such tokens are counted as
 * unknown words. With lower-casing, `<S>` and `<UNK>` are caught too; without it they are words.
 *
 * @throws QuernError('config') for an unknown `unicode` or `split` option.
 */
export function makeTokenizer(options: NormalizeOptions): Tokenizer {
  const { unicode, lowercase, split } = options;
  if (unicode !== 'none' && unicode !== 'nfc' && unicode !== 'nfkc') {
    throw new QuernError('config', `unicode: must be 'none', 'nfc' or 'nfkc', got ${JSON.stringify(unicode)}`);
  }
  if (split !== 'space' && split !== 'chars') {
    throw new QuernError('config', `split: must be 'space' or 'chars', got ${JSON.stringify(split)}`);
  }
  const form = unicode === 'nfc' ? 'NFC' : unicode === 'nfkc' ? 'NFKC' : undefined;
  const stable = unicode === 'nfc' ? NFC_STABLE : NFKC_STABLE;
  const splitter = split === 'space' ? splitOnSpace : makeCharSplitter();
  return (sentence, out) => {
    let text = form === undefined || stable.test(sentence) ? sentence : sentence.normalize(form);
    if (lowercase) text = text.toLowerCase();
    const count = splitter(text, out);
    out.length = count;
    return count;
  };
}

/** One-line human description of a normalisation, for reports and `--help`. */
export function describeNormalization(options: NormalizeOptions): string {
  const unicode = options.unicode === 'none' ? 'no Unicode normalisation' : `Unicode ${options.unicode.toUpperCase()}`;
  const letterCase = options.lowercase ? 'lower-cased' : 'case kept';
  const split = options.split === 'space' ? 'tokens separated by white space' : 'every non-space character (grapheme) a token';
  return `${unicode}, ${letterCase}, ${split}`;
}

function splitOnSpace(text: string, out: string[]): number {
  let count = 0;
  const length = text.length;
  let position = 0;
  while (position < length) {
    while (position < length && isSpaceCode(text.charCodeAt(position))) position++;
    if (position === length) break;
    const start = position;
    while (position < length && !isSpaceCode(text.charCodeAt(position))) position++;
    out[count++] = reserveMarkers(text.slice(start, position));
  }
  return count;
}

function reserveMarkers(token: string): string {
  if (token.charCodeAt(0) === 0x3c /* < */ && (token === '<s>' || token === '</s>' || token === '<unk>')) return UNKNOWN_TOKEN;
  return token;
}

function isLowSurrogate(code: number): boolean {
  return code >= 0xdc00 && code <= 0xdfff;
}

function makeCharSplitter(): (text: string, out: string[]) => number {
  const segmenter = new Intl.Segmenter(undefined, { granularity: 'grapheme' });
  return (text, out) => {
    let count = 0;
    if (!mayJoinCodePoints(text)) {
      const length = text.length;
      for (let position = 0; position < length; ) {
        const code = text.charCodeAt(position);
        const width = code >= 0xd800 && code <= 0xdbff && isLowSurrogate(text.charCodeAt(position + 1)) ? 2 : 1;
        if (!isSpaceCode(code)) out[count++] = width === 1 ? text[position] : text.slice(position, position + 2);
        position += width;
      }
      return count;
    }
    for (const { segment } of segmenter.segment(text)) {
      if (!ONLY_SPACE.test(segment)) out[count++] = segment;
    }
    return count;
  };
}
