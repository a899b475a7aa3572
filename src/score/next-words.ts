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
  // The prefix is compared as UTF-8 bytes with the model's words (no string per candidate).
  const prefixBytes = prefix === undefined ? undefined : encoder.encode(prefix);
  const wanted = (id: number): boolean => !(exclude?.has(id) ?? false) && (prefixBytes === undefined || model.wordStartsWith(id, prefixBytes));
  // Ids scored as continuations (the first score of each is its own), not to be taken again from
  // the unigram ranking.
  const seen = new Uint8Array(size + 1);
  const best = new BestScores(top);
  const backOff = model.scoreContinuations(state, (id, log10Prob, order) => {
    if (id < 1 || id > size || seen[id] !== 0) return;
    seen[id] = 1;
    if (wanted(id)) best.offer(id, log10Prob, order);
  });
  const ranked = rankedByUnigram(model);
  const empty: number[] = [];
  for (let i = 0, others = 0; i < ranked.length && others < top; i++) {
    const id = ranked[i];
    if (seen[id] !== 0 || !wanted(id)) continue;
    best.offer(id, backOff + model.logProb(empty, id).log10Prob, 1);
    others++;
  }
  return best.inOrder().map(({ id, log10Prob, order }) => ({ id, word: model.word(id), log10Prob, order }));
}

const encoder = new TextEncoder();

/**
 * The `size` best of the scores offered: highest log10 p first, the lower id first among equals
 * (as sorting every candidate and keeping the first `size` would give), kept in a binary heap whose
 * root is the worst kept, so that each of the tens of thousands of continuations of a frequent
 * word costs a comparison, and only the kept ones a string.
 */
class BestScores {
  private readonly ids: number[] = [];
  private readonly scores: number[] = [];
  private readonly orders: number[] = [];

  constructor(private readonly size: number) {}

  /** Whether entry a ranks below entry b (is worse). */
  private worse(a: number, b: number): boolean {
    return this.scores[a] < this.scores[b] || (this.scores[a] === this.scores[b] && this.ids[a] > this.ids[b]);
  }

  offer(id: number, log10Prob: number, order: number): void {
    const { ids, scores, orders } = this;
    if (ids.length < this.size) {
      ids.push(id);
      scores.push(log10Prob);
      orders.push(order);
      for (let at = ids.length - 1; at > 0;) {
        const parent = (at - 1) >> 1;
        if (!this.worse(at, parent)) break;
        this.swap(at, parent);
        at = parent;
      }
      return;
    }
    // Not better than the worst kept: dropped.
    if (log10Prob < scores[0] || (log10Prob === scores[0] && id > ids[0])) return;
    ids[0] = id;
    scores[0] = log10Prob;
    orders[0] = order;
    for (let at = 0; ;) {
      const left = 2 * at + 1;
      if (left >= ids.length) break;
      const right = left + 1;
      const child = right < ids.length && this.worse(right, left) ? right : left;
      if (!this.worse(child, at)) break;
      this.swap(at, child);
      at = child;
    }
  }

  /** The kept entries, best first. */
  inOrder(): Array<{ id: number; log10Prob: number; order: number }> {
    return this.ids
      .map((id, i) => ({ id, log10Prob: this.scores[i], order: this.orders[i] }))
      .sort((a, b) => b.log10Prob - a.log10Prob || a.id - b.id);
  }

  private swap(a: number, b: number): void {
    const { ids, scores, orders } = this;
    [ids[a], ids[b]] = [ids[b], ids[a]];
    [scores[a], scores[b]] = [scores[b], scores[a]];
    [orders[a], orders[b]] = [orders[b], orders[a]];
  }
}

export function contextState(model: PackedModel, words: readonly string[], sentenceStart = true): ModelState {
  let state = sentenceStart ? model.beginState() : new ModelState(0, []);
  for (const word of words) {
    const id = model.textWordId(word);
    state = model.advance(state, id < 0 ? model.unkId : id).state;
  }
  return state;
}
