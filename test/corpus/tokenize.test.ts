import { describe, expect, test } from 'vitest';
import { describeNormalization, isSpaceCode, makeTokenizer, mayJoinCodePoints } from '../../src/corpus/tokenize.ts';
import type { NormalizeOptions } from '../../src/corpus/types.ts';
import { QuernError } from '../../src/errors.ts';

const plain: NormalizeOptions = { unicode: 'none', lowercase: false, split: 'space' };

function tokens(options: Partial<NormalizeOptions>, sentence: string): string[] {
  const out: string[] = [];
  const count = makeTokenizer({ ...plain, ...options })(sentence, out);
  expect(out.length).toBe(count);
  return out;
}

function graphemes(text: string): string[] {
  const segmenter = new Intl.Segmenter(undefined, { granularity: 'grapheme' });
  return [...segmenter.segment(text)].map((s) => s.segment).filter((s) => !/^\s*$/.test(s));
}

describe('makeTokenizer', () => {
  test('the ligature U+FB01 becomes "fi" under NFKC only', () => {
    expect(tokens({ unicode: 'none' }, '\ufb01ne day')).toEqual(['\ufb01ne', 'day']);
    expect(tokens({ unicode: 'nfc' }, '\ufb01ne day')).toEqual(['\ufb01ne', 'day']);
    expect(tokens({ unicode: 'nfkc' }, '\ufb01ne day')).toEqual(['fine', 'day']);
  });

  test('NFC composes e + U+0301 into é; in chars mode the pair is one grapheme either way', () => {
    expect(tokens({ unicode: 'nfc' }, 'cafe\u0301')).toEqual(['caf\u00e9']);
    expect(tokens({ unicode: 'none' }, 'cafe\u0301')).toEqual(['cafe\u0301']);
    expect(tokens({ unicode: 'none', split: 'chars' }, 'e\u0301t\u00e9')).toEqual(['e\u0301', 't', '\u00e9']);
    expect(tokens({ unicode: 'nfc', split: 'chars' }, 'e\u0301t\u00e9')).toEqual(['\u00e9', 't', '\u00e9']);
  });

  test('the shortcut for stable text never skips a needed normalisation', () => {
    // Every pair of code points below U+0300 (the NFC shortcut range) is NFC-stable.
    for (let a = 0; a < 0x300; a++) {
      let pairs = '';
      for (let b = 0; b < 0x300; b++) pairs += String.fromCharCode(a, b);
      expect(pairs.normalize('NFC') === pairs, `U+${a.toString(16)}`).toBe(true);
    }
    // NFKC changes Latin-1 text, so the tokenizer must still normalise it.
    expect(tokens({ unicode: 'nfkc' }, 'ª\u00a0½ x²')).toEqual(['a', '1\u20442', 'x2']);
    expect(tokens({ unicode: 'nfc' }, 'ª½ A\u030a')).toEqual(['ª½', '\u00c5']);
  });

  test('lower-cases after normalisation', () => {
    expect(tokens({ lowercase: true }, 'Harbour LIGHTS Ωmega')).toEqual(['harbour', 'lights', 'ωmega']);
    // NFKC turns the fullwidth letters into ASCII first, then they are lower-cased.
    expect(tokens({ lowercase: true, unicode: 'nfkc' }, '\uff21\uff22C')).toEqual(['abc']);
    expect(tokens({ lowercase: false }, 'Harbour')).toEqual(['Harbour']);
  });

  test('chars mode makes each character of Japanese text a token and drops white space', () => {
    expect(tokens({ split: 'chars' }, '今日は 良い天気\u3000です')).toEqual(['今', '日', 'は', '良', 'い', '天', '気', 'で', 'す']);
    expect(tokens({ split: 'chars' }, '𠮷野家')).toEqual(['𠮷', '野', '家']); // astral code point stays whole
  });

  test('chars mode keeps multi-code-point graphemes whole', () => {
    const cases: Array<[string, string[]]> = [
      ['🇯🇵🇫🇷', ['🇯🇵', '🇫🇷']], // regional-indicator pairs
      ['a👨\u200d👩\u200d👧b', ['a', '👨\u200d👩\u200d👧', 'b']], // ZWJ sequence
      ['👍🏽!', ['👍🏽', '!']], // emoji modifier
      ['ｶﾞｷ', ['ｶﾞ', 'ｷ']], // halfwidth katakana + sound mark
      ['\u1100\u1161\u11a8x', ['\u1100\u1161\u11a8', 'x']], // conjoining Hangul jamo
      ['\u0e01\u0e33', ['\u0e01\u0e33']], // Thai sara am joins its consonant
    ];
    for (const [text, expected] of cases) {
      expect(tokens({ split: 'chars' }, text)).toEqual(expected);
      expect(graphemes(text)).toEqual(expected);
    }
  });

  test('space mode splits on every JS white-space character', () => {
    expect(tokens({}, '  a\u00a0b\u3000c\td\u2028e\ufefff  ')).toEqual(['a', 'b', 'c', 'd', 'e', 'f']);
    expect(tokens({}, ' \t ')).toEqual([]);
    expect(tokens({}, '')).toEqual([]);
  });

  test('literal sentence markers become <unk>', () => {
    expect(tokens({}, '<s> hi </s> <unk> <S> <s>x')).toEqual(['<unk>', 'hi', '<unk>', '<unk>', '<S>', '<s>x']);
    expect(tokens({ lowercase: true }, '<S> </S> <UNK>')).toEqual(['<unk>', '<unk>', '<unk>']);
  });

  test('the output array is reused and truncated', () => {
    const tokenize = makeTokenizer(plain);
    const out = ['stale', 'stale', 'stale', 'stale'];
    expect(tokenize('one two', out)).toBe(2);
    expect(out).toEqual(['one', 'two']);
  });

  test('rejects unknown options', () => {
    expect(() => makeTokenizer({ ...plain, unicode: 'nfd' as never })).toThrow(QuernError);
    expect(() => makeTokenizer({ ...plain, split: 'words' as never })).toThrow(/split: must be/);
  });

  test('describes the normalisation in one line', () => {
    expect(describeNormalization({ unicode: 'nfkc', lowercase: true, split: 'space' })).toBe(
      'Unicode NFKC, lower-cased, tokens separated by white space',
    );
    expect(describeNormalization({ unicode: 'none', lowercase: false, split: 'chars' })).toBe(
      'no Unicode normalisation, case kept, every non-space character (grapheme) a token',
    );
  });
});

describe('character classes', () => {
  test('isSpaceCode agrees with /\\s/ on every BMP code unit', () => {
    const mismatches: number[] = [];
    for (let code = 0; code <= 0xffff; code++) {
      if (isSpaceCode(code) !== /\s/.test(String.fromCharCode(code))) mismatches.push(code);
    }
    expect(mismatches).toEqual([]);
  });

  test('the code-point fast path of chars mode equals Intl.Segmenter for every code point', () => {
    // Each code point without a joining property is put beside a letter on both sides and beside
    // itself; a grapheme rule that joins it (Extend, SpacingMark, Prepend, RI pairs…) would show.
    const tokenize = makeTokenizer({ ...plain, split: 'chars' });
    const out: string[] = [];
    const batch: string[] = [];
    const failures: string[] = [];
    let checked = 0;
    const flush = (): void => {
      const text = batch.map((ch) => `a${ch}${ch}a`).join('\n');
      tokenize(text, out);
      const expected = graphemes(text);
      if (out.length !== expected.length || out.some((token, i) => token !== expected[i])) {
        for (const ch of batch) {
          const one = `a${ch}${ch}a`;
          const got: string[] = [];
          tokenize(one, got);
          if (got.join('|') !== graphemes(one).join('|')) failures.push(ch.codePointAt(0)!.toString(16));
        }
      }
      batch.length = 0;
    };
    for (let code = 0; code <= 0x3ffff; code++) {
      if (code >= 0xd800 && code <= 0xdfff) continue;
      const ch = String.fromCodePoint(code);
      if (/\s/.test(ch) || mayJoinCodePoints(ch)) continue;
      batch.push(ch);
      checked++;
      if (batch.length === 16) flush();
    }
    flush();
    expect(checked).toBeGreaterThan(200_000);
    expect(failures).toEqual([]);
  });
});
