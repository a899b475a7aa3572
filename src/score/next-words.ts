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
 * tokens by p1. The model gives the context rows' children (`PackedModel.continuations`) with the
 * back-off weights `step` would add; a long list of children (after a frequent word, tens of
 * thousands) asked for again is read best first, from its best children ranked and kept, and only
 * until no child left could be among the best `top`.
 */
import { ModelState, type ContinuationRange, type PackedModel } from '../pack/reader.ts';

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
  const { ranges, backOff } = model.continuations(state);
  // A word's first score, under the longest context that has it, is its own. `seen` holds the
  // children read so far; a range read only in part (ranked, up to where nothing left could be
  // among the best) is searched for the words of the shorter ones.
  const seen = new Uint8Array(size + 1);
  const partial: ContinuationRange[] = [];
  const scoredBefore = (id: number): boolean => {
    if (seen[id] !== 0) return true;
    for (const range of partial) if (model.findChild(range.order, range.start, range.end, id) >= 0) return true;
    return false;
  };
  const best = new BestScores(top);
  const consider = (id: number, log10Prob: number, order: number): void => {
    if (id < 1 || id > size || scoredBefore(id)) return;
    seen[id] = 1;
    if (wanted(id)) best.offer(id, log10Prob, order);
  };
  const walk = (range: ContinuationRange): void => {
    for (let row = range.start; row < range.end; row++) consider(model.childWord(range.order, row), range.base + model.childLog10Prob(range.order, row), range.order);
  };
  for (const range of ranges) {
    const ranked = range.end - range.start < RANKED_CHILDREN_MIN ? undefined : bestChildren(model, range);
    if (ranked === undefined) {
      walk(range);
      continue;
    }
    // By log10 p, the lower word id first among equals (the order of the best): once a child
    // cannot be taken, no later one can.
    let read = 0;
    for (; read < ranked.length; read++) {
      const row = ranked[read];
      const id = model.childWord(range.order, row);
      const log10Prob = range.base + model.childLog10Prob(range.order, row);
      if (!best.mayTake(id, log10Prob)) break;
      consider(id, log10Prob, range.order);
    }
    if (read < ranked.length) partial.push(range);
    // Past its best children, and some of the rest may count: read them all (those read are seen).
    else if (ranked.length < range.end - range.start) walk(range);
  }
  // The words no context continues, answered at order 1 after every back-off weight, in unigram order.
  const unigrams = rankedByUnigram(model);
  const empty: number[] = [];
  for (let i = 0, others = 0; i < unigrams.length && others < top; i++) {
    const id = unigrams[i];
    const log10Prob = backOff + model.logProb(empty, id).log10Prob;
    if (!best.mayTake(id, log10Prob)) break;
    if (scoredBefore(id) || !wanted(id)) continue;
    best.offer(id, log10Prob, 1);
    others++;
  }
  return best.inOrder().map(({ id, log10Prob, order }) => ({ id, word: model.word(id), log10Prob, order }));
}

/** Children ranges at least this long are read best first (`bestChildren`) once they have been
 *  asked for before, and only as far as a child could still be among the best; shorter ones, and
 *  any range the first time, are read whole. */
const RANKED_CHILDREN_MIN = 256;
/** How many of a range's children are kept in order of probability: enough for the best few
 *  dozen with a prefix of one or two letters (beyond them, the range is read whole). */
const RANKED_CHILDREN_KEPT = 256;
/** The ranked lists kept per model: 32,768 of them, 32 MiB at most; the least recently used go
 *  first. And how many ranges' first use is remembered (then forgotten all at once). */
const RANKED_LISTS_MAX = 32_768;
const ASKED_ONCE_MAX = 1 << 20;

const rankedLists = new WeakMap<PackedModel, { lists: Map<string, Int32Array>; askedOnce: Set<string> }>();

/**
 * The best RANKED_CHILDREN_KEPT rows of `range`, by log10 p descending and the lower word id first
 * among equals, when the range was asked for before (a keyboard asks after the same frequent words
 * again and again); undefined the first time, when ranking would cost more than reading it whole.
 */
function bestChildren(model: PackedModel, range: ContinuationRange): Int32Array | undefined {
  let cache = rankedLists.get(model);
  if (cache === undefined) rankedLists.set(model, (cache = { lists: new Map(), askedOnce: new Set() }));
  const key = `${range.order}:${range.start}`;
  const kept = cache.lists.get(key);
  if (kept !== undefined) {
    // Most recently used last.
    cache.lists.delete(key);
    cache.lists.set(key, kept);
    return kept;
  }
  if (!cache.askedOnce.has(key)) {
    if (cache.askedOnce.size >= ASKED_ONCE_MAX) cache.askedOnce.clear();
    cache.askedOnce.add(key);
    return undefined;
  }
  cache.askedOnce.delete(key);
  // The children ascend by word id, so the lower row is the lower id among equal values.
  const best = new BestScores(RANKED_CHILDREN_KEPT);
  for (let row = range.start; row < range.end; row++) best.offer(row, model.childLog10Prob(range.order, row), 0);
  const ranked = Int32Array.from(best.inOrder(), (entry) => entry.id);
  cache.lists.set(key, ranked);
  if (cache.lists.size > RANKED_LISTS_MAX) cache.lists.delete(cache.lists.keys().next().value as string);
  return ranked;
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

  /** Whether a score could still be kept: there is room, or it beats the worst kept. */
  mayTake(id: number, log10Prob: number): boolean {
    return this.ids.length < this.size || log10Prob > this.scores[0] || (log10Prob === this.scores[0] && id < this.ids[0]);
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
    if (!this.mayTake(id, log10Prob)) return;
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
