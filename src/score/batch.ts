/**
 * Scoring many sentences together with a packed model's `stepBatch` (src/pack/reader.ts): each of
 * up to `lanes` sentences has a state of its own, and every call advances each of them by one token,
 * so that the memory accesses of different sentences overlap instead of following one another. A
 * lane whose sentence ends takes the next one. The numbers are those of scoring the sentences one at
 * a time with `step` (`scoreSentence`), token for token.
 */
import { EOS } from '../corpus/vocabulary.ts';
import { assert } from '../errors.ts';
import type { DecoderState, PackedModel, SentenceScore, TokenScore } from '../pack/reader.ts';
import { SCORE_BATCH_MODEL_BYTES_MIN, SCORE_BATCH_TOKENS, SCORE_LANES, SCORE_LANES_MAX } from '../limits.ts';

/**
 * Scores `sentences` of word ids (ids in [1, V], `</s>`'s last: every id is a token to predict,
 * after `<s>`), `lanes` at a time; `onToken(sentence, position, log10Prob, order)` receives each
 * token's result, in no particular order across sentences but in order within each.
 */
export function scoreIdSentences(
  model: PackedModel, sentences: readonly ArrayLike<number>[], onToken: (sentence: number, position: number, log10Prob: number, order: number) => void, lanes = SCORE_LANES,
): void {
  if (!(Number.isInteger(lanes) && lanes >= 1 && lanes <= SCORE_LANES_MAX)) throw new RangeError(`lanes must be an integer in [1, ${SCORE_LANES_MAX}] (got ${lanes})`);
  const width = Math.min(lanes, sentences.length);
  const states: DecoderState[] = [];
  const sentenceOf = new Int32Array(width);
  const positionOf = new Int32Array(width);
  const words = new Int32Array(width);
  const log10Probs = new Float64Array(width);
  let next = 0;
  let active = 0;
  // Fill the lanes with the first sentences that have tokens.
  while (active < width && next < sentences.length) {
    const sentence = next++;
    if (sentences[sentence].length === 0) continue;
    const state = model.newState();
    states.push(state);
    sentenceOf[active] = sentence;
    positionOf[active] = 0;
    active++;
  }
  while (active > 0) {
    for (let lane = 0; lane < active; lane++) words[lane] = sentences[sentenceOf[lane]][positionOf[lane]];
    model.stepBatch(states, words, log10Probs, active);
    for (let lane = 0; lane < active; lane++) {
      const sentence = sentenceOf[lane];
      const position = positionOf[lane];
      onToken(sentence, position, log10Probs[lane], states[lane].order);
      if (position + 1 < sentences[sentence].length) {
        positionOf[lane] = position + 1;
        continue;
      }
      // The sentence is done: the lane takes the next one with tokens, or closes (the last active
      // lane moves into its place, and is then handled in this place).
      while (next < sentences.length && sentences[next].length === 0) next++;
      if (next < sentences.length) {
        sentenceOf[lane] = next++;
        positionOf[lane] = 0;
        model.resetState(states[lane]);
        continue;
      }
      active--;
      if (lane < active) {
        const state = states[lane];
        states[lane] = states[active];
        states[active] = state;
        sentenceOf[lane] = sentenceOf[active];
        positionOf[lane] = positionOf[active];
        log10Probs[lane] = log10Probs[active];
        lane--; // the moved lane's token of this call is handled next, here
      }
    }
  }
}

/**
 * Scores tokenised sentences as `model.scoreSentence` does, one result each (the same tokens,
 * values and sums), but `lanes` sentences at a time (`scoreIdSentences`). An empty sentence scores
 * `</s>` alone, as in `scoreSentence`.
 */
export function scoreSentences(model: PackedModel, sentences: readonly (readonly string[])[], lanes = SCORE_LANES): SentenceScore[] {
  const ids: Int32Array[] = [];
  const results: SentenceScore[] = [];
  for (const words of sentences) {
    const sentence = new Int32Array(words.length + 1);
    const tokens: TokenScore[] = [];
    let oov = 0;
    for (let i = 0; i < words.length; i++) {
      const word = words[i];
      let id = model.textWordId(word);
      const unknown = id < 0;
      if (unknown) {
        id = model.unkId;
        oov++;
      }
      sentence[i] = id;
      tokens.push({ word, id, oov: unknown, log10Prob: 0, order: 0 });
    }
    sentence[words.length] = model.eosId;
    tokens.push({ word: EOS, id: model.eosId, oov: false, log10Prob: 0, order: 0 });
    ids.push(sentence);
    results.push({ tokens, log10Prob: 0, log10ProbWithUnk: 0, oov });
  }
  scoreIdSentences(model, ids, (sentence, position, log10Prob, order) => {
    const token = results[sentence].tokens[position];
    token.log10Prob = log10Prob;
    token.order = order;
  }, lanes);
  // The sums in token order, as scoreSentence adds them.
  for (const result of results) {
    let log10Prob = 0;
    let log10ProbWithUnk = 0;
    for (const token of result.tokens) {
      assert(token.order > 0, 'every token of every sentence was scored');
      log10ProbWithUnk += token.log10Prob;
      if (!token.oov) log10Prob += token.log10Prob;
    }
    result.log10Prob = log10Prob;
    result.log10ProbWithUnk = log10ProbWithUnk;
  }
  return results;
}

/**
 * Whether `model`'s sentences are best scored together (`stepBatch`) rather than one at a time
 * (`step`): when its `step` is the JavaScript one and its file is SCORE_BATCH_MODEL_BYTES_MIN or
 * more. The WebAssembly `step` is faster than `stepBatch` (JavaScript) at every size measured:
 * 3.48 against 2.00 M lookups/s on the 24 MB order-5 benchmark model (95 MB file), 0.89–0.95
 * against 0.68–0.88 on the 1 GB one (3.26 GB, two runs; `stepBatch` there reads the WebAssembly
 * memory, which has no huge pages), `npm run bench:query`, 2026-12-05.
 */
export function scoresInBatches(model: PackedModel): boolean {
  return model.engine === 'js' && model.fileBytes >= SCORE_BATCH_MODEL_BYTES_MIN;
}

/**
 * Sentences given one at a time, scored in groups of up to SCORE_BATCH_TOKENS tokens with
 * `scoreSentences`: `onScore` receives each sentence's score in the order the sentences came.
 * `flush` scores what is gathered (call it at the end). Unless `scoresInBatches(model)`, it scores
 * one sentence at a time (`scoreSentence`, the same numbers): a small model's lookups mostly hit
 * the CPU's caches, and the batch's phases would only add work.
 */
export class BatchScorer {
  private group: Array<readonly string[]> = [];
  private groupTokens = 0;
  /** Whether sentences are scored together (`scoreSentences`) or one at a time. */
  readonly batched: boolean;

  constructor(private readonly model: PackedModel, private readonly onScore: (score: SentenceScore) => void, batched = scoresInBatches(model)) {
    this.batched = batched;
  }

  add(words: readonly string[]): void {
    if (!this.batched) {
      this.onScore(this.model.scoreSentence(words));
      return;
    }
    this.group.push(words);
    this.groupTokens += words.length + 1;
    if (this.groupTokens >= SCORE_BATCH_TOKENS) this.flush();
  }

  flush(): void {
    const group = this.group;
    this.group = [];
    this.groupTokens = 0;
    for (const score of scoreSentences(this.model, group)) this.onScore(score);
  }
}
