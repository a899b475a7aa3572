/**
 * The most probable next tokens after a history (`quern next`): what a keyboard offers after the
 * words typed so far (with `prefix`, the completions of a word being typed), or a look at what a
 * model expects in a context.
 *
 * Exact, without scoring the whole vocabulary. A token w whose longest n-gram h' w in the model has
 * order ≥ 2 extends a suffix h' of the history: it is a continuation of one of the history's context
 * rows (`PackedModel.continuations`). Every other token is answered by order 1, after the same
 * back-off weights, so log10 p(w | h) = (those weights) + log10 p1(w): among them, the order of p1
 * is the order of p. The candidates are therefore the continuations and the first `top` other
 * tokens by p1. The model scores the continuations in one pass over the context rows' children
 * (`scoreContinuations`, as `step` would score each, without a search), and the best `top` are
 * returned.
 */
import { ModelState, type PackedModel } from '../pack/reader.ts';

/** One predicted token. */
export interface NextToken {
  id: number;
  /** The token (`</s>` for the end of the sentence). */
  word: string;
  log10Prob: number;
  /** The order of the n-gram that answered. */
  order: number;
}

export interface NextOptions {
  /** How many tokens (≥ 1). */
  top: number;
  /** Only tokens starting with this text (a word being typed); default: all. */
  prefix?: string;
  /** Ids never offered (e.g. `<unk>`, `</s>`). */
  exclude?: ReadonlySet<number>;
}

/** Ids 1..V by log10 p1 descending, ties by id: made once per model. */
const unigramRanks = new WeakMap<PackedModel, Int32Array>();

function rankedByUnigram(model: PackedModel): Int32Array {
  let ranked = unigramRanks.get(model);
  if (ranked !== undefined) return ranked;
  const size = model.vocabularySize;
  const p1 = new Float64Array(size + 1);
  const empty: number[] = [];
  for (let id = 1; id <= size; id++) p1[id] = model.logProb(empty, id).log10Prob;
  ranked = Int32Array.from({ length: size }, (_, i) => i + 1).sort((a, b) => p1[b] - p1[a] || a - b);
  unigramRanks.set(model, ranked);
  return ranked;
}

/**
 * The `top` most probable tokens after the history of `state`, most probable first (ties by id):
 * ids 1..V (never `<s>`), less `exclude`, and with `prefix` only those whose text starts with it.
 */
export function nextTokens(model: PackedModel, state: ModelState, options: NextOptions): NextToken[] {
  const { top, prefix, exclude } = options;
  if (!(Number.isInteger(top) && top >= 1)) throw new RangeError(`top must be an integer ≥ 1 (got ${top})`);
  const size = model.vocabularySize;
  const wanted = (id: number): boolean => !(exclude?.has(id) ?? false) && (prefix === undefined || model.word(id).startsWith(prefix));
  // Ids scored as continuations (the first score of each is its own), not to be taken again from
  // the unigram ranking.
  const seen = new Uint8Array(size + 1);
  const scored: NextToken[] = [];
  const backOff = model.scoreContinuations(state, (id, log10Prob, order) => {
    if (id < 1 || id > size || seen[id] !== 0) return;
    seen[id] = 1;
    if (wanted(id)) scored.push({ id, word: model.word(id), log10Prob, order });
  });
  const ranked = rankedByUnigram(model);
  const empty: number[] = [];
  for (let i = 0, others = 0; i < ranked.length && others < top; i++) {
    const id = ranked[i];
    if (seen[id] !== 0 || !wanted(id)) continue;
    scored.push({ id, word: model.word(id), log10Prob: backOff + model.logProb(empty, id).log10Prob, order: 1 });
    others++;
  }
  scored.sort((a, b) => b.log10Prob - a.log10Prob || a.id - b.id);
  return scored.slice(0, top);
}

/**
 * The state after the tokens `words` (OOVs as `<unk>`, as scoring reads text): at the start of a
 * sentence, after `<s>` (default), or with `sentenceStart` false after them alone (a context in the
 * middle of a sentence, its history only what is given).
 */
export function contextState(model: PackedModel, words: readonly string[], sentenceStart = true): ModelState {
  let state = sentenceStart ? model.beginState() : new ModelState(0, []);
  for (const word of words) {
    const id = model.textWordId(word);
    state = model.advance(state, id < 0 ? model.unkId : id).state;
  }
  return state;
}
