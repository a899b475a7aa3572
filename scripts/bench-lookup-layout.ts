/**
 * Measures a candidate layout for the model file's lookups (src/pack/hash-layout.ts, built in memory
 * from the model by scripts/lib/hashed-lookup.ts: per order, a table keyed by (context slot, word)
 * whose bit-packed records hold the key and the values) beside the file's own reader, on the same
 * model and held-out text, in one process, passes in turn:
 *   - step        `PackedModel.step`, state carried, one sentence after another;
 *   - stepBatch   `scoreIdSentences` (src/score/batch.ts), --lanes sentences at a time;
 *   - hashed      the candidate's step: every order probed at once from the state;
 *   - hashed, lanes  the candidate, --lanes sentences at a time, order by order upwards with the
 *                 homes of all lanes read before they are searched.
 * Lookups are the held-out tokens, `</s>` included, OOVs as `<unk>` (as `bench:query --model`).
 * The figure of each is the median of --passes; Σ log10 p of each must equal step's (1e-9
 * relative), or the run fails. It prints the tables' sizes too, and the bytes per n-gram a file with
 * them in place of the n-gram sections would take (float32, and 8-bit codes from the same layouts).
 * The model must keep the suffixes of its n-grams (the batched lookup stops at the first order that
 * misses) and be normalised. The tables' structure check (`HashedOrder.check`) and the walk in row
 * order (`rowOrder`, every order) are timed too, once, before the lookups. --aligned builds
 * word-aligned records (keys padded to 32 bits: every float32 field a u32 read by index) instead of
 * bit-packed ones; the 8-bit size printed is that of bit-packed records either way. Run it with huge pages as the program has them (the script starts
 * itself again with that environment, scripts/lib/quern-env.ts) unless --huge-pages off.
 *
 *   npx tsx scripts/bench-lookup-layout.ts --model FILE --heldout TEXT [--heldout-lines 100000] [--passes 5] [--lanes 64] [--load 0.9] [--bucket-slots 4] [--aligned] [--huge-pages on|off]
 */
import { spawnSync } from 'node:child_process';
import { readFileSync, statSync } from 'node:fs';
import { parseArgs } from 'node:util';
import { BOS_ID } from '../src/corpus/vocabulary.ts';
import { openModel } from '../src/pack/reader.ts';
import { rowOrder } from '../src/pack/hash-layout.ts';
import { HashedLookup } from './lib/hashed-lookup.ts';
import { batchPass, stepPass } from './lib/lookup-passes.ts';
import { hugePagesEnv } from './lib/quern-env.ts';

const { values: args } = parseArgs({
  options: {
    model: { type: 'string' },
    heldout: { type: 'string' },
    'heldout-lines': { type: 'string', default: '100000' },
    passes: { type: 'string', default: '5' },
    lanes: { type: 'string', default: '64' },
    load: { type: 'string', default: '0.9' },
    'bucket-slots': { type: 'string', default: '4' },
    aligned: { type: 'boolean', default: false },
    'huge-pages': { type: 'string', default: 'on' },
    child: { type: 'boolean', default: false },
  },
});

if (args.model === undefined || args.heldout === undefined) throw new Error('usage: bench-lookup-layout.ts --model FILE --heldout TEXT (one sentence per line)');
if (args['huge-pages'] !== 'on' && args['huge-pages'] !== 'off') throw new Error(`--huge-pages must be on or off (got ${args['huge-pages']})`);

if (!args.child) {
  // Again in a process with the program's environment (huge pages), or explicitly without it.
  const result = spawnSync(process.execPath, [...process.execArgv, '--max-old-space-size=16384', process.argv[1], ...process.argv.slice(2), '--child'], {
    stdio: 'inherit',
    env: hugePagesEnv(args['huge-pages']),
  });
  process.exit(result.status ?? 1);
}

const log = (line: string): void => void process.stderr.write(`${line}\n`);
const passes = Number(args.passes);
const lanes = Number(args.lanes);

const model = await openModel(args.model);
const stream: number[][] = [];
for (const line of readFileSync(args.heldout, 'utf8').split('\n').slice(0, Number(args['heldout-lines']))) {
  const words = line.split(/\s+/).filter((word) => word.length > 0);
  if (words.length === 0) continue;
  stream.push([...words.map((word) => { const id = model.wordId(word); return id > BOS_ID ? id : model.unkId; }), model.eosId]);
}
const tokens = stream.reduce((sum, sentence) => sum + sentence.length, 0);
const ngrams = model.ngrams.reduce((sum, rows) => sum + rows, 0);

const built = performance.now();
const hashed = await HashedLookup.build(model, { load: Number(args.load), bucketSlots: Number(args['bucket-slots']), alignKeys: args.aligned }, log);
const buildSeconds = (performance.now() - built) / 1000;

// The next file version's other costs on these tables: the structure check a reader runs on
// request, and the walk in row order that `quern export` needs (rowOrder, order by order).
const checked = performance.now();
for (let n = 2; n <= model.order; n++) {
  const fault = hashed.tables[n].check(n === 2 ? model.ngrams[0] : hashed.tables[n - 1].layout.slots, model.vocabularySize);
  if (fault !== null) throw new Error(`order ${n}: ${fault}`);
}
const checkSeconds = (performance.now() - checked) / 1000;
const walked = performance.now();
let rowOf: Int32Array | null = null;
for (let n = 2; n <= model.order; n++) {
  const below: Int32Array | null = rowOf;
  rowOf = rowOrder(hashed.tables[n], model.ngrams[n - 1], below === null ? (id) => id : (slot) => below[slot]).rowOf;
}
const walkSeconds = (performance.now() - walked) / 1000;

function hashedSum(): number {
  let sum = 0;
  for (const sentence of stream) {
    hashed.reset();
    for (let i = 0; i < sentence.length; i++) sum += hashed.step(sentence[i]);
  }
  return sum;
}

const ways: Array<[string, () => number]> = [
  ['step', () => stepPass(model, stream)],
  [`stepBatch, ${lanes} lanes`, () => batchPass(model, stream, lanes)],
  ['hashed', hashedSum],
  [`hashed, ${lanes} lanes`, () => hashed.batchSum(stream, lanes)],
];
const perSecond: number[][] = ways.map(() => []);
const sums: number[] = [];
for (let pass = 0; pass < passes + 1; pass++) {
  for (const [index, [, run]] of ways.entries()) {
    const started = performance.now();
    const sum = run();
    const seconds = (performance.now() - started) / 1000;
    // The first pass warms up (code compiled, tables touched) and is not counted.
    if (pass > 0) perSecond[index].push(tokens / seconds);
    if (pass === 0) sums[index] = sum;
    else if (sum !== sums[index] && Math.abs(sum - sums[index]) > 1e-9 * Math.abs(sums[index])) throw new Error(`${ways[index][0]}: Σ log10 p changed between passes`);
  }
}
for (const [index, [name]] of ways.entries()) {
  if (Math.abs(sums[index] - sums[0]) > 1e-9 * Math.abs(sums[0])) throw new Error(`${name}: Σ log10 p ${sums[index]} differs from step's ${sums[0]}`);
}
const median = (values: number[]): number => [...values].sort((a, b) => a - b)[Math.floor(values.length / 2)];
const medians = perSecond.map(median);
const million = (value: number): string => `${(value / 1e6).toFixed(3)} M/s`;
const fileBytes = statSync(args.model).size;
console.log(`model ${args.model}: order ${model.order}, ${ngrams.toLocaleString('en-US')} n-grams, ${(fileBytes / 1e9).toFixed(2)} GB (${(fileBytes / ngrams).toFixed(2)} bytes each), ${model.encodingName}`);
console.log(`held-out ${args.heldout}: ${stream.length.toLocaleString('en-US')} sentences, ${tokens.toLocaleString('en-US')} lookups; huge pages ${args['huge-pages']}; load average ${readFileSync('/proc/loadavg', 'utf8').split(' ').slice(0, 3).join(' ')}`);
// The file as it would be with the hashed tables in place of the n-gram sections of orders ≥ 2 and
// of order 1's children (which the hashed state does not read): everything else kept as it is.
const kept = model.sections.filter((section) => section.order < 2 && !(section.order === 1 && section.name.startsWith('children'))).reduce((sum, section) => sum + section.bytes, 0);
const unigramValueBytes = model.sections.filter((section) => section.order === 1 && section.name.startsWith('log10')).reduce((sum, section) => sum + section.bytes, 0);
const float32File = kept + hashed.bytes;
// 8-bit: order 1's two value arrays at one byte a value, a 256-entry f64 codebook per value array.
const codebooks = (2 * model.order - 1) * 256 * 8;
const eightBitFile = kept - unigramValueBytes + unigramValueBytes / 4 + hashed.bytesWithValueBits(8) + codebooks;
console.log(
  `hashed tables (load ${args.load}, ${args['bucket-slots']} slots per bucket${args.aligned ? ', word-aligned records' : ''}), built in ${buildSeconds.toFixed(1)} s: ${(hashed.bytes / 1e9).toFixed(2)} GB; ` +
    `a file with them ≈ ${(float32File / ngrams).toFixed(2)} bytes per n-gram with float32 values, ≈ ${(eightBitFile / ngrams).toFixed(2)} with 8-bit codes; ` +
    `structure check ${checkSeconds.toFixed(1)} s, walk in row order ${walkSeconds.toFixed(1)} s`,
);
for (const [index, [name]] of ways.entries()) {
  console.log(`  ${name.padEnd(22)} ${million(medians[index])}  ×${(medians[index] / medians[0]).toFixed(2)} step  (passes ${perSecond[index].map((value) => (value / 1e6).toFixed(2)).join(', ')})`);
}
console.log(`Σ log10 p ${sums[0].toFixed(4)} in every way`);
