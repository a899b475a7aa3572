/**
 * The count's inner loops, this checkout's beside a git revision's, alternately in one process, on
 * seeded synthetic data (a Zipf-like vocabulary of 200,000 words): what a change to one of them
 * gains, without the noise of a whole `quern count` (bench:count measures that, with its stages).
 *
 *   npm run bench:kernels -- --against REV [--rounds 8] [--only decode,encode,…]
 *
 * Kernels (each timed per record or row, its result checked equal between the two):
 *   decode   decodeRecords of order-5 store/run blocks of 1,024 records (src/count/block-codec.ts)
 *   encode   encodeBlock of the same blocks
 *   tally    TallyBuilder.addRows (`add` per row in revisions before it) of 3 M order-5 rows (src/merge/tally.ts)
 *   merge    mergeRuns of 3 in-memory runs of 1 M order-5 rows, 30 % of them in every run
 *   merge3   mergeRuns of 6 in-memory runs of 400,000 order-3 rows, 30 % of them in every run (the
 *            count's 6 chunk groups at order 3)
 *   count3   a CounterSet of order 3 (as a count worker makes it) counting 2 M positions of
 *   count5   sentences, then every counter's spillOrder; order 5 likewise
 *   scan     scanLines of 2 M tokens of text (Zipf-like words) into a fresh WordTable, as the
 *            vocabulary pass tokenizes and interns (src/corpus/byte-tokenizer.ts; in WebAssembly
 *            where the table is, word-scan.as.ts)
 *   lookup   the same text scanned in lookup mode in a table of every word, as the count pass
 *            reads text
 *   scanjs   scan with the table's engine 'js' (a revision without engines ignores it): the
 *            JavaScript twin beside the revision's
 *
 * --against  the revision whose src/ is the baseline
 * --rounds   rounds; each runs both once, alternating which goes first (default 8)
 *
 * Prints each kernel's median and least time per item for both and their ratio; exits with status 1
 * unless both give the same results.
 */
import { join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { parseArgs } from 'node:util';
import { Prng } from './lib/prng.ts';
import { extractRevision } from './lib/revision-tree.ts';

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const KERNELS = ['decode', 'encode', 'tally', 'merge', 'merge3', 'count3', 'count5', 'scan', 'lookup', 'scanjs'] as const;
type Kernel = (typeof KERNELS)[number];

const { values } = parseArgs({ options: { against: { type: 'string' }, rounds: { type: 'string', default: '8' }, only: { type: 'string' } } });
if (values.against === undefined) {
  console.error(`usage: npm run bench:kernels -- --against REV [--rounds 8] [--only ${KERNELS.join(',')}]`);
  process.exit(2);
}
const rounds = Number(values.rounds);
const only = (values.only?.split(',') ?? [...KERNELS]) as Kernel[];
for (const name of only) if (!KERNELS.includes(name)) throw new Error(`unknown kernel ${name}; one of ${KERNELS.join(', ')}`);

/** The modules a kernel uses, from one source tree. */
interface Modules {
  codec: typeof import('../src/count/block-codec.ts');
  tally: typeof import('../src/merge/tally.ts');
  merge: typeof import('../src/count/run-merge.ts');
  counters: typeof import('../src/count/counter-set.ts');
  spill: typeof import('../src/count/spill-sort.ts');
  limits: typeof import('../src/limits.ts');
  tokenizer: typeof import('../src/corpus/byte-tokenizer.ts');
  words: typeof import('../src/corpus/word-table.ts');
}

async function modulesOf(root: string): Promise<Modules> {
  const load = (file: string): Promise<never> => import(pathToFileURL(join(root, 'src', file)).href) as Promise<never>;
  return {
    codec: await load('count/block-codec.ts'), tally: await load('merge/tally.ts'), merge: await load('count/run-merge.ts'),
    counters: await load('count/counter-set.ts'), spill: await load('count/spill-sort.ts'), limits: await load('limits.ts'),
    tokenizer: await load('corpus/byte-tokenizer.ts'), words: await load('corpus/word-table.ts'),
  };
}

const VOCAB = 200_000;
const random = new Prng(2026);
/** A word id, Zipf-like: small ids far more often. */
const word = (): number => Math.floor(VOCAB * random.next() ** 4);

/** Sorted distinct rows of `order` ids, `first` their first id when given. */
function sortedRows(count: number, order: number, first?: number): Uint32Array {
  const rows: number[][] = [];
  for (let i = 0; i < count; i++) rows.push(Array.from({ length: order }, (_, j) => (j === 0 && first !== undefined ? first : word())));
  rows.sort((a, b) => { for (let j = 0; j < order; j++) if (a[j] !== b[j]) return a[j] - b[j]; return 0; });
  const out = new Uint32Array(rows.length * order);
  let m = 0;
  for (const row of rows) {
    if (m > 0 && row.every((id, j) => id === out[(m - 1) * order + j])) continue;
    out.set(row, m * order);
    m++;
  }
  return out.slice(0, m * order);
}

// ---- data, made once ----
const ORDER = 5;
const blocks = Array.from({ length: 400 }, () => {
  const keys = sortedRows(1024, ORDER, word()).subarray(0, 1000 * ORDER);
  const records = keys.length / ORDER;
  return { keys, counts: Float64Array.from({ length: records }, () => 1 + Math.floor(random.next() * random.next() * 5)), records };
});
const blockRecords = blocks.reduce((sum, b) => sum + b.records, 0);
const tallyRows = sortedRows(3_000_000, ORDER);
const tallyCounts = Float64Array.from({ length: tallyRows.length / ORDER }, () => 1 + random.int(3));
/** `count` sorted distinct runs of `own + shared` rows of `order` ids, the `shared` rows in every run. */
function mergeInputs(count: number, order: number, own: number, shared: number): Uint32Array[] {
  const common = sortedRows(shared, order);
  return Array.from({ length: count }, () => {
    const all: number[][] = [];
    for (const keys of [common, sortedRows(own, order)]) for (let r = 0; r < keys.length / order; r++) all.push(Array.from(keys.subarray(r * order, (r + 1) * order)));
    all.sort((a, b) => { for (let j = 0; j < order; j++) if (a[j] !== b[j]) return a[j] - b[j]; return 0; });
    const out: number[] = [];
    let last: number[] | undefined;
    for (const row of all) if (!last || row.some((id, j) => id !== last![j])) { out.push(...row); last = row; }
    return Uint32Array.from(out);
  });
}
const runs = mergeInputs(3, ORDER, 700_000, 300_000);
const runs3 = mergeInputs(6, 3, 280_000, 120_000);
/** Sentences of 5–30 words, wrapped in <s> = 0 and </s> = 1, for the counters. */
const sentenceStarts: number[] = [0];
const sentenceIds: number[] = [];
while (sentenceIds.length < 2_000_000) {
  const length = 5 + random.int(26);
  sentenceIds.push(0);
  for (let i = 0; i < length; i++) sentenceIds.push(2 + word());
  sentenceIds.push(1);
  sentenceStarts.push(sentenceIds.length);
}
const ids = Uint32Array.from(sentenceIds);
const starts = Uint32Array.from(sentenceStarts);
const sentences = starts.length - 1;
/** The same sentences as text, one per line, each word id w written as `w<w>` (Zipf-like words of
 *  2–7 bytes): what the vocabulary pass reads. */
const text = Buffer.from(
  Array.from({ length: starts.length - 1 }, (_, s) => Array.from(sentenceIds.slice(starts[s] + 1, starts[s + 1] - 1), (id) => `w${id}`).join(' ')).join('\n') + '\n',
  'latin1',
);
const textTokens = sentenceIds.length - 2 * (starts.length - 1);

/** mergeRuns over in-memory runs of `order` rows, in batches of 8,192 as a run reader gives them. */
async function mergeKernel(m: Modules, inputs: Uint32Array[], order: number): Promise<{ ns: number; check: string }> {
  const sources = inputs.map((keys, s) => {
    let at = 0;
    const rows = keys.length / order;
    return {
      name: `run ${s}`, order,
      async nextBatch() {
        if (at >= rows) return null;
        const end = Math.min(rows, at + 8192);
        const batch = { keys: keys.subarray(at * order, end * order), counts: new Float64Array(end - at).fill(1), recordCount: end - at };
        at = end;
        return batch;
      },
      async close() {},
    };
  });
  const records = inputs.reduce((sum, r) => sum + r.length / order, 0);
  const t0 = performance.now();
  const batches = [];
  for await (const batch of m.merge.mergeRuns(sources, order)) batches.push(batch);
  const ns = ((performance.now() - t0) * 1e6) / records;
  // Checked after the clock stops: the output batches are fresh arrays (takeOutput), kept until here.
  let out = 0;
  let total = 0;
  let digest = 0;
  for (const batch of batches) {
    out += batch.recordCount;
    for (let r = 0; r < batch.recordCount; r++) total += batch.counts[r];
    for (let i = 0; i < batch.recordCount * order; i++) digest = (Math.imul(digest, 31) + batch.keys[i]) | 0;
  }
  return { ns, check: `${out} ${total} ${digest}` };
}

/** Runs a kernel once: its time per item in ns and a check value. */
type Run = (m: Modules) => Promise<{ ns: number; check: string }>;

const kernels: Record<Kernel, Run> = {
  async decode(m) {
    const encoded = blocks.map((b) => {
      const buf = Buffer.alloc(m.codec.blockBytesMax(ORDER, b.records));
      return buf.subarray(0, m.codec.encodeBlock(buf, 0, b.keys, b.counts, 0, b.records, ORDER));
    });
    const keys = new Uint32Array(1024 * ORDER);
    const counts = new Float64Array(1024);
    const t0 = performance.now();
    let sum = 0;
    for (let rep = 0; rep < 5; rep++) {
      for (const buf of encoded) {
        for (let j = 0; j < ORDER; j++) keys[j] = buf.readUInt32LE(12 + 4 * j);
        sum += m.codec.decodeRecords(buf, m.codec.blockHeaderBytes(ORDER), buf.length, ORDER, buf.readUInt32LE(4), keys, counts);
      }
    }
    return { ns: ((performance.now() - t0) * 1e6) / (5 * blockRecords), check: String(sum) };
  },
  async encode(m) {
    const buf = Buffer.alloc(m.codec.blockBytesMax(ORDER, 1024));
    const t0 = performance.now();
    let bytes = 0;
    for (let rep = 0; rep < 5; rep++) for (const b of blocks) bytes += m.codec.encodeBlock(buf, 0, b.keys, b.counts, 0, b.records, ORDER);
    return { ns: ((performance.now() - t0) * 1e6) / (5 * blockRecords), check: String(bytes) };
  },
  async tally(m) {
    const tally = new m.tally.TallyBuilder(ORDER);
    const rows = tallyCounts.length;
    const t0 = performance.now();
    // addRows where the revision has it (2026-12-05), else its per-row add.
    const perRow = tally as unknown as { add?: (keys: Uint32Array, offset: number, count: number) => void };
    if (typeof tally.addRows === 'function') tally.addRows(tallyRows, tallyCounts, 0, rows);
    else for (let r = 0; r < rows; r++) perRow.add!(tallyRows, r * ORDER, tallyCounts[r]);
    const ns = ((performance.now() - t0) * 1e6) / rows;
    return { ns, check: JSON.stringify(tally.finish()) };
  },
  merge: (m) => mergeKernel(m, runs, ORDER),
  merge3: (m) => mergeKernel(m, runs3, 3),
  count3: (m) => countAndSpill(m, 3),
  count5: (m) => countAndSpill(m, 5),
  scan: (m) => scanKernel(m, 'fresh', 'auto'),
  lookup: (m) => scanKernel(m, 'lookup', 'auto'),
  scanjs: (m) => scanKernel(m, 'fresh', 'js'),
};

/** scanLines of the text: into a fresh table, interning; or in lookup mode, in a table that has
 *  every word already (interned by a scan before the clock starts). `engine` is passed to a WordTable
 *  that takes one. */
async function scanKernel(m: Modules, mode: 'fresh' | 'lookup', engine: 'auto' | 'js'): Promise<{ ns: number; check: string }> {
  const table = new (m.words.WordTable as new (slots?: number, engine?: string) => InstanceType<typeof m.words.WordTable>)(undefined, engine);
  m.tokenizer.reserveWords(table);
  if (mode === 'lookup') m.tokenizer.scanLines(text, 0, text.length, table, true, m.tokenizer.newTokenBlock());
  const block = m.tokenizer.newTokenBlock();
  const t0 = performance.now();
  m.tokenizer.scanLines(text, 0, text.length, table, mode === 'fresh', block);
  const ns = ((performance.now() - t0) * 1e6) / textTokens;
  let check = 0;
  for (let t = 0; t < block.tokens; t++) check = (Math.imul(check, 31) + block.entries[t]) | 0;
  return { ns, check: `${block.tokens} ${table.size} ${check}` };
}

/** A count worker's loop without its I/O: a CounterSet counts the sentences in batches, then every
 *  counter is sorted for a spill of 16 partitions (the set sized to hold it all: one spill). */
async function countAndSpill(m: Modules, order: number): Promise<{ ns: number; check: string }> {
  const options = m.limits.COUNTER_APPEND_ORDER_MIN === undefined ? undefined : { appendFrom: m.limits.COUNTER_APPEND_ORDER_MIN };
  const set = new m.counters.CounterSet(order, 4 * 2 ** 30, VOCAB + 2, options);
  const positions = ids.length - sentences;
  const t0 = performance.now();
  for (let s = 0; s < sentences;) {
    let end = s;
    let batch = 0;
    while (end < sentences && batch + (starts[end + 1] - starts[end] - 1) <= m.limits.COUNTER_BATCH_POSITIONS) batch += starts[end + 1] - starts[end++] - 1;
    if (!set.reserve(batch + 1)) throw new Error('the kernel set is sized to hold every n-gram');
    set.addSentences(ids, starts, s, end);
    s = end;
  }
  let records = 0;
  for (const counter of set.counters) {
    // As spill.ts calls it: with the WebAssembly memory the scratch is in, where the set has one.
    const scratch = set.sortScratch();
    const sorter = (set as { scratchSorter?: unknown }).scratchSorter;
    const sorted = (m.spill.spillOrder as (...args: unknown[]) => ReturnType<typeof m.spill.spillOrder>)(counter, 16, VOCAB + 2, scratch, sorter);
    for (let p = 0; p < 16; p++) records += sorted.recordsOf(p);
  }
  set.clear();
  return { ns: ((performance.now() - t0) * 1e6) / positions, check: String(records) };
}

const { hash, tree } = extractRevision(REPO, values.against, ['src'], (h) => join(REPO, 'bench-out', `kernels-baseline-${h}`));
const builds: Array<[string, Modules]> = [['this checkout', await modulesOf(REPO)], [hash, await modulesOf(tree)]];
const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[xs.length >> 1];
let mismatch = false;
console.log(`kernels, this checkout beside ${hash}, ${rounds} rounds alternating (ns per record, row or position)`);
for (const name of only) {
  const times: number[][] = [[], []];
  const checks = new Set<string>();
  for (let round = 0; round < rounds; round++) {
    for (const k of round % 2 === 0 ? [0, 1] : [1, 0]) {
      const result = await kernels[name](builds[k][1]);
      times[k].push(result.ns);
      checks.add(result.check);
    }
  }
  if (checks.size !== 1) mismatch = true;
  const [a, b] = times.map(median);
  console.log(`  ${name.padEnd(7)} this ${a.toFixed(1).padStart(7)}  ${hash} ${b.toFixed(1).padStart(7)}  ratio ${(a / b).toFixed(2)}  (least ${Math.min(...times[0]).toFixed(1)} against ${Math.min(...times[1]).toFixed(1)})${checks.size === 1 ? '' : '  RESULTS DIFFER'}`);
}
if (mismatch) {
  console.error('the two builds gave different results');
  process.exit(1);
}
