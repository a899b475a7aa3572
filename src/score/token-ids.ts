/**
 * Token blocks scored as id sentences: the corpus readers' byte tokenizer (corpus/read-tokens.ts,
 * lookup mode) looks the text's tokens up in the model file's own vocabulary (`PackedModel.find`,
 * by their bytes and FNV-1a hash), so the blocks hold model ids, −1 for an OOV. The ids, and so
 * every number, are those of `PackedModel.textWordId` and `scoreSentence`: `<s>`, `</s>` and `<unk>`
 * written in the text read as OOVs, like every word outside the vocabulary.
 */
import type { TokenBlock } from '../corpus/byte-tokenizer.ts';
import { SCORE_BATCH_TOKENS } from '../limits.ts';
import type { DecoderState, PackedModel } from '../pack/reader.ts';
import { scoreIdSentences, scoresInBatches } from './batch.ts';

/** What a scored sentence reports (`SentenceScore` without the tokens). */
export type SentenceSums = (tokens: number, oov: number, log10Prob: number, log10ProbWithUnk: number) => void;

/**
 * Sentences of token blocks scored as `BatchScorer` scores sentences of words: each is its tokens'
 * ids (an OOV as `<unk>`) and `</s>`; groups of up to SCORE_BATCH_TOKENS tokens scored together
 * (`scoreIdSentences`) when `scoresInBatches(model)`, else one at a time
 * with `step`. `onSentence` receives each sentence's figures, in order, its sums added in token
 * order as `scoreSentence` adds them.
 */
export class BlockScorer {
  /** Whether sentences are scored together (`scoreIdSentences`) or one at a time (`step`). */
  readonly batched: boolean;
  private ids = new Int32Array(SCORE_BATCH_TOKENS + 1024);
  private oov = new Uint8Array(SCORE_BATCH_TOKENS + 1024);
  private tokens = 0;
  /** starts[s]: where sentence s's ids begin; starts[sentences] = tokens. */
  private starts: number[] = [0];
  private readonly state: DecoderState;

  constructor(
    private readonly model: PackedModel, private readonly onSentence: SentenceSums,
    batched = scoresInBatches(model),
  ) {
    this.batched = batched;
    this.state = model.newState();
  }

  /** Adds the sentences of `block` (its entries model ids, read with the model as the table; kept
   *  nothing of). */
  add(block: TokenBlock): void {
    const { entries, sentenceEnds } = block;
    const unk = this.model.unkId;
    const eos = this.model.eosId;
    let from = 0;
    for (let s = 0; s < block.sentences; s++) {
      const to = sentenceEnds[s];
      this.reserve(to - from + 1);
      const ids = this.ids;
      const oov = this.oov;
      let at = this.tokens;
      for (let i = from; i < to; i++, at++) {
        const id = entries[i];
        if (id < 0) {
          ids[at] = unk;
          oov[at] = 1;
        } else {
          ids[at] = id;
          oov[at] = 0;
        }
      }
      ids[at] = eos;
      oov[at] = 0;
      this.tokens = at + 1;
      this.starts.push(this.tokens);
      from = to;
      if (this.tokens >= SCORE_BATCH_TOKENS) this.flush();
    }
  }

  /** Scores what is gathered (call it at the end). */
  flush(): void {
    const count = this.starts.length - 1;
    if (count === 0) return;
    const { ids, oov, starts } = this;
    const withUnk = new Float64Array(count);
    const without = new Float64Array(count);
    if (this.batched) {
      const sentences = Array.from({ length: count }, (_, s) => ids.subarray(starts[s], starts[s + 1]));
      // Tokens of a sentence arrive in order, so each sum is added in token order.
      scoreIdSentences(this.model, sentences, (s, position, log10Prob) => {
        withUnk[s] += log10Prob;
        if (oov[starts[s] + position] === 0) without[s] += log10Prob;
      });
    } else {
      const state = this.state;
      for (let s = 0; s < count; s++) {
        this.model.resetState(state);
        for (let at = starts[s]; at < starts[s + 1]; at++) {
          const log10Prob = this.model.step(state, ids[at]);
          withUnk[s] += log10Prob;
          if (oov[at] === 0) without[s] += log10Prob;
        }
      }
    }
    for (let s = 0; s < count; s++) {
      let oovs = 0;
      for (let at = starts[s]; at < starts[s + 1]; at++) oovs += oov[at];
      this.onSentence(starts[s + 1] - starts[s], oovs, without[s], withUnk[s]);
    }
    this.tokens = 0;
    this.starts = [0];
  }

  /** Room for `more` ids after those gathered. */
  private reserve(more: number): void {
    if (this.tokens + more <= this.ids.length) return;
    const size = Math.max(2 * this.ids.length, this.tokens + more);
    const ids = new Int32Array(size);
    ids.set(this.ids.subarray(0, this.tokens));
    const oov = new Uint8Array(size);
    oov.set(this.oov.subarray(0, this.tokens));
    this.ids = ids;
    this.oov = oov;
  }
}
