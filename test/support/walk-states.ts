/**
 * What `step` answers along sentences, as strings that compare exactly (test/pack/lookup-wasm.test.ts
 * and its worker thread, test/support/wasm-walk-worker.ts).
 */
import type { DecoderState, PackedModel } from '../../src/pack/reader.ts';

/** Steps `sentences` (ids, `</s>` appended) through `model` with each of `states`, one after another,
 *  and returns every (log10 p, order, length, history) seen. */
export function walk(model: PackedModel, states: DecoderState[], sentences: number[][]): string[] {
  const seen: string[] = [];
  for (const state of states) {
    for (const sentence of sentences) {
      model.resetState(state);
      for (const id of [...sentence, model.eosId]) {
        const log10Prob = model.step(state, id);
        // Object.is through the string: −0 and 0, NaN, −∞ all stay distinct.
        seen.push(`${Object.is(log10Prob, -0) ? '-0' : String(log10Prob)} ${state.order} ${state.length} ${state.history.join(',')}`);
      }
    }
  }
  return seen;
}
