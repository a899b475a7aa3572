/**
 * Shared by the estimate tests: small corpora, the list of methods, the contexts to check, and an
 * independent reference for every method — the formulas written out plainly over n-gram strings
 * counted by the naive counter of test/stats/fixtures.ts (DESIGN.md's conventions), sharing no code
 * with src/estimate.
 */
import { countNgrams } from '../stats/fixtures.ts';
import { seededRandom } from '../support/seeded.ts';
import { countCorpus, sentenceIds, wordIdMap, type CountTables } from '../../src/estimate/counts.ts';
import { estimate, type EstimateRequest } from '../../src/estimate/estimate.ts';
import type { LanguageModel, MethodParameters } from '../../src/estimate/model.ts';

export const BOS = '<s>';

/** Sentences from text: one per line, words separated by spaces. */
export function corpus(text: string): string[][] {
  return text
    .split('\n')
    .map((line) => line.trim())
    .filter((line) => line.length > 0)
    .map((line) => line.split(/\s+/));
}

/**
 * A seeded corpus: `sentences` sentences of 1..`lengthMax` words drawn from `types` words with
 * Zipf-like frequencies (word i with weight 1/(i+1)), so that counts of every size occur.
 */
export function randomCorpus(seed: number, sentences: number, types: number, lengthMax: number): string[][] {
  const random = seededRandom(seed);
  const weights = Array.from({ length: types }, (_, i) => 1 / (i + 1));
  const total = weights.reduce((a, b) => a + b, 0);
  const draw = (): string => {
    let u = random() * total;
    for (let i = 0; i < types; i++) {
      u -= weights[i];
      if (u <= 0) return `w${i}`;
    }
    return `w${types - 1}`;
  };
  return Array.from({ length: sentences }, () => Array.from({ length: 1 + Math.floor(random() * lengthMax) }, draw));
}

/**
 * A seeded corpus with structure across words: each word is, with probability 1/2, fixed by the two
 * words before it (a hashed choice among the 50 most frequent), and otherwise drawn Zipf-like from
 * `types` words. Higher orders therefore predict better than lower ones, but not perfectly, as in text.
 */
export function markovCorpus(seed: number, sentences: number, types: number, lengthMax: number): string[][] {
  const random = seededRandom(seed);
  const weights = Array.from({ length: types }, (_, i) => 1 / (i + 1));
  const total = weights.reduce((a, b) => a + b, 0);
  const zipf = (): number => {
    let u = random() * total;
    for (let i = 0; i < types; i++) {
      u -= weights[i];
      if (u <= 0) return i;
    }
    return types - 1;
  };
  return Array.from({ length: sentences }, () => {
    const length = 1 + Math.floor(random() * lengthMax);
    const words: number[] = [];
    for (let i = 0; i < length; i++) {
      const previous = i >= 1 ? words[i - 1] + 1 : 0;
      const before = i >= 2 ? words[i - 2] + 1 : 0;
      words.push(random() < 0.5 ? (previous * 31 + before * 17 + 7) % 50 : zipf());
    }
    return words.map((i) => `w${i}`);
  });
}

/** The normalised methods. */
export const NORMALISED_METHODS = ['modified-kneser-ney', 'kneser-ney', 'absolute-discounting', 'katz', 'witten-bell', 'jelinek-mercer'] as const;
export type NormalisedMethod = (typeof NORMALISED_METHODS)[number];

/** Estimates with `method`, allowing the fallback discounts (tiny corpora have undefined ones) and
 *  fitting Jelinek-Mercer weights on `heldOut`. */
export function estimateWith(method: NormalisedMethod | 'stupid-backoff', counts: CountTables, heldOut: string[][], cutoffs?: number[]): LanguageModel {
  const idOf = wordIdMap(counts.vocabulary);
  const heldOutIds = heldOut.map((words) => sentenceIds(idOf, counts.vocabulary, words).ids);
  const request = { method, fallback: true, heldOut: heldOutIds, cutoffs } as EstimateRequest;
  return estimate(counts, request);
}

/** Vocabulary ids of words (`<s>` is id 0). */
export function idsOf(counts: CountTables, words: readonly string[]): number[] {
  return words.map((word) => {
    const id = counts.vocabulary.words.indexOf(word);
    if (id < 0) throw new Error(`no word ${word} in the vocabulary`);
    return id;
  });
}

/**
 * Histories to check for a model of order N trained on `sentences`: every context seen in training
 * (the first n−1 words of every n-gram, n = 2..N, `<s>` alone included), the empty history, and
 * `unseen` random histories of N−1 vocabulary words (most never seen as a context).
 */
export function histories(sentences: string[][], order: number, vocabularyWords: string[], unseen: number, seed: number): string[][] {
  const found = new Map<string, string[]>();
  found.set('', []);
  const counts = countNgrams(sentences, order);
  for (let n = 2; n <= order; n++) {
    for (const key of counts[n - 1].keys()) {
      const context = key.split(' ').slice(0, n - 1);
      found.set(context.join(' '), context);
    }
  }
  const random = seededRandom(seed);
  const words = vocabularyWords.filter((word) => word !== BOS);
  for (let i = 0; i < unseen && order > 1; i++) {
    const history = Array.from({ length: order - 1 }, () => words[Math.floor(random() * words.length)]);
    if (random() < 0.3) history[0] = BOS;
    found.set(history.join(' '), history);
  }
  return [...found.values()];
}

/** One word after a context, for the reference. */
interface Row {
  word: string;
  /** The count the method uses (raw or Kneser-Ney's). */
  count: number;
  raw: number;
  /** Not dropped by a cutoff. */
  kept: boolean;
}

interface KatzContext {
  seenMass: number;
  discounted: Map<string, number>;
  room: number;
  beta: number;
  total: number;
}

/**
 * The reference: p(w | h) by each method's formula, over string n-grams. `parameters` supplies the
 * discounts and weights the model used (where a test wants them checked against the published
 * formulas, it computes them itself and compares); everything else is recomputed here.
 */
export class Reference {
  readonly order: number;
  readonly vocabulary: string[];
  readonly cutoffs: number[];
  /** raw[n − 1]: n-gram string → count. */
  readonly raw: Array<Map<string, number>>;
  /** continuation[n − 1]: n-gram string → N1+(• x), for n < N. */
  readonly continuation: Array<Map<string, number>>;
  /** successors[n − 1]: context string → [word, raw count] of the n-grams seen after it. */
  private readonly successors: Array<Map<string, Array<[string, number]>>>;
  /** Probabilities computed so far, per parameters object (one per model). */
  private readonly memo = new WeakMap<MethodParameters, Map<string, number>>();
  private readonly katzMemo = new WeakMap<MethodParameters, Map<string, KatzContext>>();
  private readonly rowsMemo = new Map<string, Row[]>();

  constructor(sentences: string[][], order: number, vocabularyWords: string[], cutoffs?: number[]) {
    this.order = order;
    this.vocabulary = vocabularyWords.filter((word) => word !== BOS);
    this.cutoffs = cutoffs ?? new Array<number>(order).fill(1);
    this.raw = countNgrams(sentences, order);
    this.continuation = [];
    for (let n = 1; n < order; n++) {
      const left = new Map<string, number>();
      for (const key of this.raw[n].keys()) {
        const suffix = key.split(' ').slice(1).join(' ');
        left.set(suffix, (left.get(suffix) ?? 0) + 1);
      }
      this.continuation.push(left);
    }
    this.successors = this.raw.map((map) => {
      const byContext = new Map<string, Array<[string, number]>>();
      for (const [key, count] of map) {
        const words = key.split(' ');
        const context = words.slice(0, -1).join(' ');
        if (!byContext.has(context)) byContext.set(context, []);
        byContext.get(context)!.push([words[words.length - 1], count]);
      }
      return byContext;
    });
  }

  /** Kneser-Ney's count of an n-gram at order n: raw at the highest order and for `<s> …`, else N1+(• x). */
  kneserNeyCount(key: string, n: number): number {
    if (n === this.order || key.startsWith(`${BOS} `)) return this.raw[n - 1].get(key) ?? 0;
    return this.continuation[n - 1].get(key) ?? 0;
  }

  /** The words after `context` at order n (all vocabulary words at order 1), with their counts of `kind`. */
  private rows(context: string[], n: number, kind: 'raw' | 'kneser-ney'): Row[] {
    const prefix = context.join(' ');
    const memoKey = `${kind}|${n}|${prefix}`;
    const cached = this.rowsMemo.get(memoKey);
    if (cached !== undefined) return cached;
    const rows = this.rowsOf(prefix, n, kind);
    this.rowsMemo.set(memoKey, rows);
    return rows;
  }

  private rowsOf(prefix: string, n: number, kind: 'raw' | 'kneser-ney'): Row[] {
    const words = n === 1 ? this.vocabulary.map((word): [string, number] => [word, this.raw[0].get(word) ?? 0]) : this.successors[n - 1].get(prefix) ?? [];
    return words.map(([word, raw]) => {
      const key = n === 1 ? word : `${prefix} ${word}`;
      return { word, raw, count: kind === 'raw' ? raw : this.kneserNeyCount(key, n), kept: n === 1 || raw >= this.cutoffs[n - 1] };
    });
  }

  /** p(w | history) of the method, following DESIGN.md's history rule. */
  probability(parameters: MethodParameters, history: string[], word: string): number {
    const context = this.order === 1 ? [] : history.slice(-(this.order - 1));
    return this.level(parameters, context.length + 1, context, word);
  }

  private level(parameters: MethodParameters, n: number, context: string[], word: string): number {
    if (!this.memo.has(parameters)) this.memo.set(parameters, new Map());
    const memo = this.memo.get(parameters)!;
    const memoKey = `${n}|${context.join(' ')}|${word}`;
    const cached = memo.get(memoKey);
    if (cached !== undefined) return cached;
    const result = this.compute(parameters, n, context, word);
    memo.set(memoKey, result);
    return result;
  }

  /** Katz's quantities of one context (they do not depend on the word looked up). */
  private katzContext(parameters: MethodParameters, n: number, context: string[], rows: Row[], lower: (w: string) => number): KatzContext {
    if (parameters.method !== 'katz') throw new Error('katz only');
    if (!this.katzMemo.has(parameters)) this.katzMemo.set(parameters, new Map());
    const memo = this.katzMemo.get(parameters)!;
    const key = `${n}|${context.join(' ')}`;
    const cached = memo.get(key);
    if (cached !== undefined) return cached;
    const { k } = parameters;
    const d = parameters.discounts[n - 1].values;
    const total = rows.reduce((sum, row) => sum + row.count, 0);
    const seen = rows.filter((row) => row.kept && row.count > 0);
    const seenWords = new Set(seen.map((row) => row.word));
    const unseenWords = this.vocabulary.filter((w) => !seenWords.has(w));
    const discounted = new Map<string, number>();
    for (const row of seen) discounted.set(row.word, row.count <= k ? d[row.count - 1] * row.count : row.count);
    let left = total - [...discounted.values()].reduce((a, b) => a + b, 0);
    // Every count above k and nothing left for the unseen words: each gives up (1 − d_k)·k.
    if (left === 0 && unseenWords.length > 0 && (1 - d[k - 1]) * k > 0) {
      for (const row of seen) if (row.count > k) discounted.set(row.word, row.count - (1 - d[k - 1]) * k);
      left = total - [...discounted.values()].reduce((a, b) => a + b, 0);
    }
    // Where the left-over mass goes: the unseen words, by their lower-order probability (order 1:
    // equally). With nowhere to go, the seen probabilities are renormalised.
    const room = n === 1 ? unseenWords.length : unseenWords.reduce((sum, w) => sum + lower(w), 0);
    const result = { seenMass: (total - left) / total, discounted, room, beta: left / total, total };
    memo.set(key, result);
    return result;
  }

  private compute(parameters: MethodParameters, n: number, context: string[], word: string): number {
    const size = this.vocabulary.length;
    if (n === 0) return 1 / size;
    const lower = (w: string): number => this.level(parameters, n - 1, context.slice(1), w);
    const method = parameters.method;
    const rows = this.rows(context, n, method === 'modified-kneser-ney' || method === 'kneser-ney' ? 'kneser-ney' : 'raw');
    const total = rows.reduce((sum, row) => sum + row.count, 0);
    if (total === 0) return lower(word); // a context never seen backs off entirely
    const own = rows.find((row) => row.word === word);

    switch (method) {
      case 'modified-kneser-ney':
      case 'kneser-ney':
      case 'absolute-discounting': {
        const values = parameters.discounts[n - 1].values;
        const discount = (c: number): number => (c === 0 ? 0 : values.length === 1 ? values[0] : values[Math.min(c, 3) - 1]);
        let gamma = 0;
        for (const row of rows) gamma += row.kept ? discount(row.count) : row.count;
        gamma /= total;
        const alpha = own !== undefined && own.kept ? Math.max(own.count - discount(own.count), 0) / total : 0;
        return alpha + gamma * lower(word);
      }
      case 'witten-bell': {
        const types = rows.filter((row) => row.count > 0).length;
        let moved = types;
        for (const row of rows) if (!row.kept) moved += row.count;
        const alpha = own !== undefined && own.kept ? own.count / (total + types) : 0;
        return alpha + (moved / (total + types)) * lower(word);
      }
      case 'jelinek-mercer': {
        const buckets = parameters.weights.orders[n - 1].buckets;
        const bucket = parameters.weights.bucketed && n > 1 ? Math.min(Math.floor(Math.log2(total)), buckets.length - 1) : 0;
        const lambda = buckets[bucket].weight;
        const keptTotal = rows.reduce((sum, row) => sum + (row.kept ? row.count : 0), 0);
        const alpha = own !== undefined && own.kept ? (lambda * own.count) / total : 0;
        return alpha + (1 - (lambda * keptTotal) / total) * lower(word);
      }
      case 'katz': {
        const { seenMass, discounted, room, beta, total: contextTotal } = this.katzContext(parameters, n, context, rows, lower);
        if (discounted.has(word)) return discounted.get(word)! / contextTotal / (room === 0 ? seenMass : 1);
        if (room === 0) return 0;
        return n === 1 ? beta / room : (beta / room) * lower(word);
      }
      default:
        throw new Error(`no reference for ${method}`);
    }
  }
}

/** Counts of `sentences` at `order`, in memory. */
export function countsOf(sentences: string[][], order: number): CountTables {
  return countCorpus(sentences, order);
}
