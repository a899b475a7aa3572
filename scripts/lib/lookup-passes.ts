/**
 * One pass of state-carried lookups over a stream of sentences (word ids, `</s>` last) through a
 * packed model: the figure bench:query and bench:lookup-layout time, returning Σ log10 p.
 */
import type { PackedModel } from '../../src/pack/reader.ts';
import { scoreIdSentences } from '../../src/score/batch.ts';

/** Sentence after sentence with `step`, the state reset at each (a decoder's loop). */
export function stepPass(model: PackedModel, stream: number[][]): number {
  let sum = 0;
  const state = model.newState();
  for (const sentence of stream) {
    model.resetState(state);
    for (let i = 0; i < sentence.length; i++) sum += model.step(state, sentence[i]);
  }
  return sum;
}

/** The stream scored in lanes, `lanes` sentences at a time (`stepBatch`): one lookup per token, as
 *  in stepPass; Σ log10 p equal to stepPass's up to the order of the additions. */
export function batchPass(model: PackedModel, stream: number[][], lanes: number): number {
  let sum = 0;
  scoreIdSentences(model, stream, (_sentence, _position, log10Prob) => {
    sum += log10Prob;
  }, lanes);
  return sum;
}
