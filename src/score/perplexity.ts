/**
 * Perplexity of a normalised model on tokenised sentences (DESIGN.md, "Language-model conventions").
 *
 * Each sentence (a non-empty array of tokens; an empty one is not a sentence and is skipped) is
 * wrapped as `<s> w1 … wm </s>`; every token after `<s>`, `</s>` included, is predicted from the last
 * N−1 tokens before it. A token outside the vocabulary — and a literal `<s>`, `</s>` or `<unk>`, which
 * stand for unknown words — is an OOV: it is scored as `<unk>` and stays in the history as `<unk>`.
 *
 *   perplexity        = 10^(−Σ log10 p / tokens)   over the tokens that are not OOV (their count and
 *                                                  log10 p are left out of both sums; `oov` says how many);
 *   perplexityWithUnk = 10^(−Σ log10 p / tokens)   over all predicted tokens, OOVs scored as `<unk>`.
 */
import { QuernError } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { sentenceIds, wordIdMap } from '../estimate/counts.ts';
import { logProb, type LanguageModel } from '../estimate/model.ts';

/** Result of `perplexity`. */
export interface PerplexityResult {
  sentences: number;
  /** Predicted tokens, `</s>` and OOVs included. */
  tokens: number;
  /** Tokens outside the vocabulary. */
  oov: number;
  /** Σ log10 p over the tokens that are not OOV. */
  log10Prob: number;
  /** Σ log10 p over all tokens, OOVs scored as `<unk>`. */
  log10ProbWithUnk: number;
  /** 10^(−log10Prob / (tokens − oov)). */
  perplexity: number;
  /** 10^(−log10ProbWithUnk / tokens). */
  perplexityWithUnk: number;
}

/** The sums perplexity is computed from. */
export type PerplexitySums = Omit<PerplexityResult, 'perplexity' | 'perplexityWithUnk'>;

/** `sums` with both perplexities (DESIGN.md): without OOVs, and with them scored as `<unk>`. */
export function withPerplexities<T extends PerplexitySums>(sums: T): T & Pick<PerplexityResult, 'perplexity' | 'perplexityWithUnk'> {
  return {
    ...sums,
    perplexity: 10 ** (-sums.log10Prob / (sums.tokens - sums.oov)),
    perplexityWithUnk: 10 ** (-sums.log10ProbWithUnk / sums.tokens),
  };
}

/** Refuses a model whose numbers are not probabilities. */
export function requireNormalised(model: LanguageModel, what: string): void {
  if (!model.normalised) {
    throw new QuernError('config', `${what} needs a normalised model; this ${model.parameters.method} model gives scores, not probabilities`);
  }
}

/** Perplexity of `model` on `sentences` (module comment). */
export function perplexity(model: LanguageModel, sentences: Iterable<readonly string[]>): PerplexityResult {
  requireNormalised(model, 'perplexity');
  const idOf = wordIdMap(model.vocabulary);
  const { eosId, unkId } = model.vocabulary;
  const result = { sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0 };
  const history: number[] = [];
  for (const words of sentences) {
    if (words.length === 0) continue;
    result.sentences++;
    const { ids } = sentenceIds(idOf, model.vocabulary, words);
    history.length = 0;
    history.push(BOS_ID);
    for (let i = 0; i <= ids.length; i++) {
      const word = i < ids.length ? ids[i] : eosId;
      const isOov = i < ids.length && (word === unkId);
      const { log10Prob } = logProb(model, history, word);
      result.tokens++;
      result.log10ProbWithUnk += log10Prob;
      if (isOov) result.oov++;
      else result.log10Prob += log10Prob;
      history.push(word);
      if (history.length >= model.order) history.shift();
    }
  }
  if (result.sentences === 0) throw new QuernError('input', 'there is nothing to score: no sentence was given');
  return withPerplexities(result);
}
