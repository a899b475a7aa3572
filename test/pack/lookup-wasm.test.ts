/**
 * The WebAssembly lookups (src/pack/lookup-wasm.ts, lookup-step.as.ts): the committed module is what
 * its source compiles to, and `step` gives the JavaScript lookups' numbers bit for bit — every
 * encoding, orders 1 to 7, packed ids of 16 bits and of other widths, a model that is not normalised
 * — whether a state's block is in the WebAssembly memory or copied in. (The fuzz of
 * corrupt.test.ts compares both on damaged files too.)
 */
import { spawnSync } from 'node:child_process';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Worker } from 'node:worker_threads';
import { afterAll, beforeAll, describe, expect, test } from 'vitest';
import { BOS_ID } from '../../src/corpus/vocabulary.ts';
import { countCorpus, sentenceIds, wordIdMap } from '../../src/estimate/counts.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { StopGate } from '../../src/job/stop-gate.ts';
import { LOOKUP_WASM_MEMORY_BYTES_MAX, LOOKUP_WASM_STATES_MAX } from '../../src/limits.ts';
import { wasmLayout, wasmMemory } from '../../src/pack/lookup-wasm.ts';
import { DecoderState, modelFromShared, openModel, type PackedModel } from '../../src/pack/reader.ts';
import { packModel, type PackOptions } from '../../src/pack/writer.ts';
import { estimateWith, markovCorpus, type NormalisedMethod } from '../estimate/support.ts';
import { expectCommittedWasm } from '../support/committed-wasm.ts';
import { walk } from '../support/walk-states.ts';
import { temporaryDirectory } from './support.ts';

const REPO = fileURLToPath(new URL('../..', import.meta.url));
const BOOT = new URL('../../src/count/worker-boot.mjs', import.meta.url);
const WALK_WORKER = new URL('../support/wasm-walk-worker.ts', import.meta.url).href;
const { dir, remove } = temporaryDirectory('wasm');
afterAll(remove);

test('the committed lookup-step.wasm is what asc (the pinned AssemblyScript) compiles from lookup-step.as.ts', () => {
  expectCommittedWasm('src/pack/lookup-step.as.ts', 'src/pack/asconfig.json', 'src/pack/lookup-step.wasm');
});

const train = markovCorpus(31, 400, 60, 14);
const test_ = markovCorpus(32, 80, 70, 16); // 10 types never seen in training: OOVs
let fileIndex = 0;

async function packed(order: number, method: NormalisedMethod | 'stupid-backoff', options: Partial<PackOptions>, sentences = train): Promise<{ file: string; ids: number[][] }> {
  const counts = countCorpus(sentences, order);
  const file = join(dir, `m${fileIndex++}.qm`);
  await packModel(estimateWith(method, counts, markovCorpus(33, 40, 60, 14)), { fingerprint: 'wasm', ...options }, nodeFs, file);
  const idOf = wordIdMap(counts.vocabulary);
  const ids = [...sentences.slice(0, 40), ...test_].map((words) => sentenceIds(idOf, counts.vocabulary, words).ids);
  return { file, ids };
}

/** The WebAssembly and JavaScript lookups of `file` along `ids`: the same, with a state of the
 *  memory, a state of its own (copied in) and a state made by another opening of the file. */
async function expectSameLookups(file: string, ids: number[][]): Promise<number> {
  const wasm = await openModel(file);
  const js = await openModel(file, { engine: 'js' });
  const other = await openModel(file);
  expect(wasm.engine).toBe('wasm');
  expect(js.engine).toBe('js');
  const inMemory = wasm.newState();
  expect(inMemory.owner).not.toBeNull();
  const expected = walk(js, [js.newState()], ids);
  expect(walk(wasm, [inMemory], ids)).toEqual(expected);
  expect(walk(wasm, [new DecoderState()], ids)).toEqual(expected);
  expect(walk(wasm, [other.newState()], ids)).toEqual(expected);
  // Scoring (step underneath) and the stateless lookup agree too.
  const sentence = ids[ids.length - 1];
  expect(wasm.logProb([BOS_ID, ...sentence], wasm.eosId)).toEqual(js.logProb([BOS_ID, ...sentence], js.eosId));
  return expected.length;
}

describe('step in WebAssembly gives the JavaScript numbers bit for bit', () => {
  const cases: Array<[string, number, NormalisedMethod | 'stupid-backoff', Partial<PackOptions>]> = [
    ['float32, order 3', 3, 'modified-kneser-ney', {}],
    ['float64, order 4', 4, 'katz', { floatBits: 64 }],
    ['8-bit codes, order 5', 5, 'witten-bell', { quantBits: 8 }],
    ['16-bit codes, order 3', 3, 'kneser-ney', { quantBits: 16 }],
    ['order 1', 1, 'absolute-discounting', {}],
    ['order 2', 2, 'jelinek-mercer', {}],
    ['order 7', 7, 'modified-kneser-ney', {}],
    ['stupid backoff (not normalised: an unseen context has a weight)', 4, 'stupid-backoff', {}],
  ];
  for (const [name, order, method, options] of cases) {
    test(name, async () => {
      const { file, ids } = await packed(order, method, options);
      expect(await expectSameLookups(file, ids)).toBeGreaterThan(1000);
    });
  }

  test('word ids of exactly 16 bits (the JavaScript lookups read them as a Uint16Array; the WebAssembly ones as any width)', async () => {
    // 33,000 types: ids of bitsFor(33,000) = 16 bits.
    const many: string[][] = [];
    for (let i = 0; i < 33_000; i += 11) many.push(Array.from({ length: 11 }, (_, j) => `w${i + j}`));
    const { file, ids } = await packed(3, 'modified-kneser-ney', {}, [...train, ...many]);
    const model = await openModel(file);
    expect(model.vocabularySize).toBeGreaterThanOrEqual(2 ** 15);
    expect(model.vocabularySize).toBeLessThan(2 ** 16);
    const sentences = [...ids, ...many.slice(0, 200).map((words) => words.map((word) => model.wordId(word)))];
    await expectSameLookups(file, sentences);
  });
});

describe('state blocks', () => {
  let file: string;
  let ids: number[][];
  beforeAll(async () => {
    ({ file, ids } = await packed(4, 'modified-kneser-ney', {}));
  });

  test(`past ${LOOKUP_WASM_STATES_MAX} states alive, the next ones have blocks of their own, and answer the same`, async () => {
    const model = await openModel(file);
    const js = await openModel(file, { engine: 'js' });
    const states = Array.from({ length: LOOKUP_WASM_STATES_MAX + 2 }, () => model.newState());
    const inMemory = states.filter((state) => state.owner !== null).length;
    // One block is the scratch block, one `advance`'s state.
    expect(inMemory).toBe(LOOKUP_WASM_STATES_MAX - 2);
    const some = ids.slice(0, 5);
    const expected = walk(js, [js.newState()], some);
    for (const state of [states[0], states[states.length - 1]]) expect(walk(model, [state], some)).toEqual(expected);
  });

  test('a collected state gives its block back (node --expose-gc)', () => {
    const script = `
      import { openModel } from './src/pack/reader.ts';
      const model = await openModel(${JSON.stringify(file)});
      let kept = 0;
      for (let round = 0; round < 4; round++) {
        for (let i = 0; i < ${LOOKUP_WASM_STATES_MAX}; i++) model.newState();
        globalThis.gc();
        await new Promise((resolve) => setTimeout(resolve, 20));
        if (model.newState().owner !== null) kept++;
      }
      process.stdout.write(String(kept));
    `;
    const result = spawnSync(process.execPath, ['--expose-gc', '--import', 'tsx', '--input-type=module', '-e', script], { cwd: REPO, encoding: 'utf8' });
    expect(result.stderr).toBe('');
    expect(result.stdout).toBe('4');
  });
});

describe('worker threads', () => {
  test('a model shared with worker threads answers there in WebAssembly too, each thread on state blocks of its own, at the same time: the same numbers', async () => {
    const { file, ids } = await packed(4, 'modified-kneser-ney', { quantBits: 8 });
    const model = await openModel(file, { shared: true });
    const expected = walk(await openModel(file, { engine: 'js' }), [new DecoderState()], ids);
    const workers = [0, 1].map(() => new Worker(BOOT, { workerData: { module: WALK_WORKER, stopGate: new StopGate().buffer, model: model.shareable(), ids, rounds: 300 } }));
    const answers = workers.map((worker) => new Promise<{ engine: string; owned: boolean; seen: string[]; differing: number }>((resolve, reject) => {
      worker.once('message', resolve);
      worker.once('error', reject);
      worker.once('exit', (code) => reject(new Error(`the worker exited (${code}) without an answer`)));
    }));
    // The main thread steps meanwhile, on its own blocks of the same memory, until both answered.
    let answered = 0;
    for (const answer of answers) void answer.then(() => answered++, () => answered++);
    const inMain = model.newState();
    let rounds = 0;
    while (answered < answers.length) {
      const seen = walk(model, [inMain], ids);
      if (seen.some((line, i) => line !== expected[i])) expect(seen).toEqual(expected);
      rounds++;
      await new Promise((resolve) => setImmediate(resolve));
    }
    expect(rounds).toBeGreaterThan(3);
    for (const answer of await Promise.all(answers)) {
      expect(answer.differing).toBe(0);
      expect(answer.engine).toBe('wasm');
      expect(answer.owned).toBe(true);
      expect(answer.seen).toEqual(expected);
    }
    await Promise.all(workers.map((worker) => worker.terminate()));
  });
});

test('both steps refuse a word outside [1, V] (and <s>, id 0) and leave the state as it was', async () => {
  const { file, ids } = await packed(3, 'modified-kneser-ney', {});
  for (const engine of ['wasm', 'js'] as const) {
    const model = await openModel(file, { engine });
    for (const state of [model.newState(), new DecoderState()]) {
      model.resetState(state);
      model.step(state, ids[0][0]);
      const before = [state.length, state.order, state.history.join(',')];
      for (const word of [0, -1, model.vocabularySize + 1, 1.5, Number.NaN]) {
        expect(() => model.step(state, word), `${engine} ${word}`).toThrow(/word must be a vocabulary id in \[1, \d+\]/);
        expect([state.length, state.order, state.history.join(',')]).toEqual(before);
      }
    }
  }
});

describe('choosing the lookups', () => {
  test("'auto' is WebAssembly, shared or not; 'js' is JavaScript, shared or not; a wrong choice is refused", async () => {
    const { file } = await packed(3, 'modified-kneser-ney', {});
    expect((await openModel(file)).engine).toBe('wasm');
    expect((await openModel(file, { engine: 'auto', shared: true })).engine).toBe('wasm');
    expect((await openModel(file, { engine: 'js', shared: true })).engine).toBe('js');
    expect(modelFromShared((await openModel(file, { engine: 'js', shared: true })).shareable()).engine).toBe('js');
    await expect(openModel(file, { engine: 'fast' as never })).rejects.toMatchObject({ code: 'config', message: expect.stringMatching(/engine must be 'auto', 'wasm' or 'js' \(got fast\)/) });
  });

  test('where no WebAssembly memory can be had (a process limited to 8 GB of address space), the JavaScript lookups answer, the same numbers; engine "wasm" is refused there', async () => {
    // The compiled reader: tsx, which runs the sources, itself fails without WebAssembly memory.
    if (spawnSync(process.execPath, [join(REPO, 'scripts/build.mjs'), '--check']).status !== 0) {
      process.stderr.write('lookup-wasm.test.ts: dist/ is not current (npm run build): the fallback without WebAssembly memory was not checked\n');
      return;
    }
    const { file, ids } = await packed(3, 'modified-kneser-ney', {});
    const script = `
      import { openModel } from './dist/pack/reader.js';
      const model = await openModel(${JSON.stringify(file)});
      const state = model.newState();
      const seen = [];
      for (const id of ${JSON.stringify(ids[0])}) seen.push(model.step(state, id));
      let refused = '';
      await openModel(${JSON.stringify(file)}, { engine: 'wasm' }).catch((error) => { refused = error.code + ': ' + error.message; });
      process.stdout.write(JSON.stringify({ engine: model.engine, seen, refused }));
    `;
    const result = spawnSync('bash', ['-c', 'ulimit -v 8000000 && exec "$0" "$@"', process.execPath, '--input-type=module', '-e', script], { cwd: REPO, encoding: 'utf8' });
    expect(result.stderr).toBe('');
    expect(result.status).toBe(0);
    const limited = JSON.parse(result.stdout) as { engine: string; seen: number[]; refused: string };
    expect(limited.engine).toBe('js');
    expect(limited.refused).toMatch(/^limit: .*m\d+\.qm: no WebAssembly memory of \d+ bytes: .*; open it with engine 'auto' or 'js'$/);
    const model = await openModel(file);
    expect(model.engine).toBe('wasm');
    const state = model.newState();
    expect(limited.seen).toEqual(ids[0].map((id) => model.step(state, id)));
  });

  test('a model needing more than 4 GiB of WebAssembly memory gets none (openModel then reads buffers)', () => {
    const layout = wasmLayout(LOOKUP_WASM_MEMORY_BYTES_MAX - 1024, 5, 1);
    expect(layout.bytes).toBeGreaterThan(LOOKUP_WASM_MEMORY_BYTES_MAX);
    const memory = wasmMemory(layout);
    expect(memory).toBeInstanceOf(Error);
    expect((memory as Error).message).toMatch(/needs \d+ bytes of WebAssembly memory, over its 4294967296/);
  });
});
