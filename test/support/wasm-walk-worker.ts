/**
 * A worker thread of test/pack/lookup-wasm.test.ts (loaded by worker-boot.mjs): opens the model it
 * is given (`modelFromShared`), steps the sentences through it `rounds` times on one state, and
 * posts what it saw in the first round (`walk`), the rounds that saw otherwise,
 * the lookups it ran and whether the state's block is in the WebAssembly memory.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { modelFromShared, type SharedModel } from '../../src/pack/reader.ts';
import { walk } from './walk-states.ts';

const { model: shared, ids, rounds } = workerData as { model: SharedModel; ids: number[][]; rounds: number };
const model = modelFromShared(shared);
const state = model.newState();
let first: string[] = [];
let differing = 0;
for (let round = 0; round < rounds; round++) {
  const seen = walk(model, [state], ids);
  if (round === 0) first = seen;
  else if (seen.some((line, i) => line !== first[i])) differing++;
}
parentPort?.postMessage({ engine: model.engine, owned: state.owner !== null, seen: first, differing });
