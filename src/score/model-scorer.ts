/**
 * Perplexity of a packed model (a model file opened with `openModel`) on tokenised sentences, by the
 * same rules and with the same result as `perplexity` of src/score/perplexity.ts for an in-memory
 * model (DESIGN.md, "Language-model conventions"): each non-empty sentence is wrapped as
 * `<s> w1 … wm </s>`; every token after `<s>`, `</s>` included, is predicted from the last N−1
 * tokens before it; a token outside the vocabulary (and a literal `<s>`, `</s>` or `<unk>`) is an OOV,
 * scored as `<unk>` and kept in the history as `<unk>`.
 *
 * The sentences of a model whose JavaScript lookups answer, from a file of
 * SCORE_BATCH_MODEL_BYTES_MIN, are scored together, many at once (`BatchScorer`, src/score/batch.ts:
 * the same numbers as `scoreSentence`, token for token), so that their lookups' memory accesses
 * overlap; others one at a time (`scoresInBatches`).
 */
import { QuernError } from '../errors.ts';
import type { PackedModel } from '../pack/reader.ts';
import { BatchScorer } from './batch.ts';
import { withPerplexities, type PerplexityResult } from './perplexity.ts';

/** Perplexity of a packed model on `sentences`; refuses a model that is not normalised. */
export function packedPerplexity(model: PackedModel, sentences: Iterable<readonly string[]>): PerplexityResult {
  if (!model.normalised) {
    throw new QuernError('config', `perplexity needs a normalised model; this ${model.parameters.method} model gives scores, not probabilities`);
  }
  const result = { sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0 };
  const scorer = new BatchScorer(model, (score) => {
    result.sentences++;
    result.tokens += score.tokens.length;
    result.oov += score.oov;
    result.log10Prob += score.log10Prob;
    result.log10ProbWithUnk += score.log10ProbWithUnk;
  });
  for (const words of sentences) if (words.length > 0) scorer.add(words);
  scorer.flush();
  if (result.sentences === 0) throw new QuernError('input', 'there is nothing to score: no sentence was given');
  return withPerplexities(result);
}
