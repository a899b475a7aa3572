/**
 * The count workers' hot path, old against new, side by side in one process on the same data: the
 * vocabulary pass (bytes → word counts), the words → ids step of the count pass, n-gram counting
 * into a CounterSet, and the spill sort. "Old" is the source tree of a baseline commit, extracted
 * with `git archive` into bench-out/ (read-only for the repository); "new" is the working tree.
 *
 *   npx tsx scripts/bench-hot-path.ts [--corpus DIR] [--file NAME] [--order 3] [--rounds 3]
 *                                     [--baseline d08f859] [--partitions 16] [--only STEP,...]
 *
 * --corpus    a directory of text shards (default bench-out/corpus-20MB-few-large; generate it with
 *             `npx tsx scripts/gen-corpus.ts --bytes 20MB --out DIR --shape few-large`)
 * --file      the shard to read, one chunk (default: the first shard of the corpus)
 * --order     highest n-gram order counted (default 3)
 * --rounds    rounds; each runs old and new once per step, alternating which goes first (default 5)
 * --baseline  commit whose src/ is the old path (default d08f859, before the byte-level work)
 * --only      steps to run: vocabulary, ids, count, sort (default all)
 *
 * The machines here are shared, so each step reports, over the rounds, the least and the median
 * wall time and the median CPU time (process.cpuUsage: user + system of the whole process, GC
 * threads included), and the ratio old/new of each. Under load the least time is the steadiest
 * figure of what the code costs; the first round includes compiling (warm-up) for both. Every step also
 * checks that old and new produce the same result (word counts, id streams, n-gram counts, sorted
 * runs) and stops with exit status 1 if not.
 */
import { execFileSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { existsSync, mkdirSync, readdirSync, rmSync } from 'node:fs';
import * as os from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { parseArgs } from 'node:util';
import { BOS_ID } from '../src/corpus/vocabulary.ts';
import { discoverInputs } from '../src/corpus/discover.ts';
import { RESERVED_WORDS, reserveWords } from '../src/corpus/byte-tokenizer.ts';
import { TokenReader } from '../src/corpus/read-tokens.ts';
import { WordTable } from '../src/corpus/word-table.ts';
import type { Chunk, InputFile, NormalizeOptions, ReadOptions } from '../src/corpus/types.ts';
import { CounterSet } from '../src/count/counter-set.ts';
import { spillOrder } from '../src/count/spill-sort.ts';
import { COUNTER_BATCH_POSITIONS } from '../src/limits.ts';

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));

const { values } = parseArgs({
  options: {
    corpus: { type: 'string', default: join(REPO, 'bench-out/corpus-20MB-few-large') },
    file: { type: 'string' },
    order: { type: 'string', default: '3' },
    rounds: { type: 'string', default: '5' },
    baseline: { type: 'string', default: 'd08f859' },
    partitions: { type: 'string', default: '16' },
    only: { type: 'string', default: 'vocabulary,ids,count,sort' },
  },
});
const order = Number(values.order);
const rounds = Number(values.rounds);
const partitions = Number(values.partitions);
const steps = new Set(values.only!.split(','));
if (!Number.isInteger(order) || order < 1 || order > 7) throw new Error(`--order ${values.order}: must be 1..7`);
if (!Number.isInteger(rounds) || rounds < 1) throw new Error(`--rounds ${values.rounds}: must be a positive integer`);

// ---- the old path: the baseline commit's sources ---------------------------------------------

function extractBaseline(commit: string): string {
  const hash = execFileSync('git', ['rev-parse', '--short', commit], { cwd: REPO, encoding: 'utf8' }).trim();
  const dir = join(REPO, 'bench-out', `hot-path-baseline-${hash}`);
  if (!existsSync(join(dir, 'src', 'count', 'counter-set.ts'))) {
    rmSync(dir, { recursive: true, force: true });
    mkdirSync(dir, { recursive: true });
    const archive = execFileSync('git', ['archive', '--format=tar', hash, 'src'], { cwd: REPO, maxBuffer: 1 << 28 });
    execFileSync('tar', ['-x', '-C', dir], { input: archive });
  }
  return dir;
}

const baselineDir = extractBaseline(values.baseline!);
const old = {
  read: await import(pathToFileURL(join(baselineDir, 'src/corpus/read.ts')).href),
  tokenize: await import(pathToFileURL(join(baselineDir, 'src/corpus/tokenize.ts')).href),
  counterSet: await import(pathToFileURL(join(baselineDir, 'src/count/counter-set.ts')).href),
  spillSort: await import(pathToFileURL(join(baselineDir, 'src/count/spill-sort.ts')).href),
};

// ---- data -------------------------------------------------------------------------------------

const fileName = values.file ?? readdirSync(values.corpus!).filter((f) => f.endsWith('.txt')).sort()[0];
if (fileName === undefined) throw new Error(`no .txt shard in ${values.corpus}; generate one with scripts/gen-corpus.ts`);
const [input] = await discoverInputs([join(values.corpus!, fileName)]);
const chunk: Chunk = { index: 0, fileIndex: 0, byteStart: 0, byteEnd: input.bytes };
const readOptions: ReadOptions = { format: 'text', textField: undefined, skipBad: false };
const normalize: NormalizeOptions = { unicode: 'none', lowercase: false, split: 'space' };
const budgetBytes = 1 << 30;

// ---- measuring --------------------------------------------------------------------------------

interface Sample { wallMs: number; cpuMs: number }
interface Summary { wallMsMin: number; wallMs: number; cpuMs: number }

/** Time a run spends on work that is not part of the path measured (copies kept for the check). */
let excludedMs = 0;

async function measure(run: () => Promise<unknown> | unknown): Promise<Sample> {
  excludedMs = 0;
  const cpu = process.cpuUsage();
  const start = performance.now();
  await run();
  const wallMs = performance.now() - start - excludedMs;
  const used = process.cpuUsage(cpu);
  return { wallMs, cpuMs: (used.user + used.system) / 1000 - excludedMs };
}

function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 ? sorted[mid] : (sorted[mid - 1] + sorted[mid]) / 2;
}

const results: Array<{ step: string; old: Summary; new: Summary }> = [];

/** Runs `oldRun` and `newRun` `rounds` times, alternating which goes first; `check` compares results. */
async function sideBySide<T>(step: string, oldRun: () => Promise<T> | T, newRun: () => Promise<T> | T, check: (a: T, b: T) => void, setup?: (which: 'old' | 'new') => Promise<void> | void): Promise<void> {
  const samples = { old: [] as Sample[], new: [] as Sample[] };
  for (let round = 0; round < rounds; round++) {
    const order: Array<'old' | 'new'> = round % 2 === 0 ? ['old', 'new'] : ['new', 'old'];
    const outputs: Partial<Record<'old' | 'new', T>> = {};
    for (const which of order) {
      await setup?.(which);
      globalThis.gc?.();
      let output: T | undefined;
      samples[which].push(await measure(async () => { output = await (which === 'old' ? oldRun() : newRun()); }));
      outputs[which] = output;
    }
    check(outputs.old!, outputs.new!);
  }
  const summary = (list: Sample[]): Summary => ({
    wallMsMin: Math.min(...list.map((s) => s.wallMs)), wallMs: median(list.map((s) => s.wallMs)), cpuMs: median(list.map((s) => s.cpuMs)),
  });
  const row = { step, old: summary(samples.old), new: summary(samples.new) };
  results.push(row);
  print(row);
}

let headerPrinted = false;
function print(row: { step: string; old: Summary; new: Summary }): void {
  const f = (ms: number): string => ms.toFixed(0).padStart(7);
  const r = (a: number, b: number): string => `${(a / b).toFixed(2)}×`.padStart(7);
  if (!headerPrinted) {
    headerPrinted = true;
    process.stdout.write(`${''.padEnd(26)}${'old (ms)'.padStart(24)}${'new (ms)'.padStart(24)}${'old/new'.padStart(24)}\n`);
    process.stdout.write(`${'step'.padEnd(26)}${'   min median cpu'.padStart(24).repeat(3)}\n`);
  }
  process.stdout.write(
    `${row.step.padEnd(26)}   ${f(row.old.wallMsMin)}${f(row.old.wallMs)}${f(row.old.cpuMs)}   ${f(row.new.wallMsMin)}${f(row.new.wallMs)}${f(row.new.cpuMs)}` +
    `   ${r(row.old.wallMsMin, row.new.wallMsMin)}${r(row.old.wallMs, row.new.wallMs)}${r(row.old.cpuMs, row.new.cpuMs)}\n`,
  );
}

function fail(message: string): never {
  process.stderr.write(`bench-hot-path: ${message}\n`);
  process.exit(1);
}

// ---- the steps --------------------------------------------------------------------------------

/** A pass's word counts, turned into a Map only for the check (the workers send them once per phase). */
type WordCounts = () => Map<string, number>;

/** Old vocabulary pass, as the worker of the baseline did it: tokenizer strings and a Map. */
async function oldVocabulary(file: InputFile): Promise<WordCounts> {
  const tokenize = old.tokenize.makeTokenizer(normalize);
  const tokens: string[] = [];
  const wordSlots = new Map<string, number>();
  const slotCounts: number[] = [];
  let unkSeen = 0;
  await old.read.readChunk(file, chunk, readOptions, (sentence: string) => {
    const n = tokenize(sentence, tokens);
    for (let i = 0; i < n; i++) {
      const word = tokens[i];
      const slot = wordSlots.get(word);
      if (slot !== undefined) slotCounts[slot]++;
      else if (word === '<unk>') unkSeen++;
      else {
        wordSlots.set(word, slotCounts.length);
        slotCounts.push(1);
      }
    }
  });
  return () => {
    const counts = new Map<string, number>();
    for (const [word, slot] of wordSlots) counts.set(word, slotCounts[slot]);
    counts.set('<unk>', unkSeen);
    return counts;
  };
}

/** New vocabulary pass, as worker.ts does it. */
async function newVocabulary(file: InputFile): Promise<WordCounts> {
  const table = new WordTable();
  reserveWords(table);
  const reader = new TokenReader(normalize, table, true);
  let entryCounts = new Float64Array(1 << 12);
  await reader.read(file, chunk, readOptions, (block) => {
    if (entryCounts.length < table.size) {
      const grown = new Float64Array(Math.max(table.size, 2 * entryCounts.length));
      grown.set(entryCounts);
      entryCounts = grown;
    }
    for (let i = 0; i < block.tokens; i++) entryCounts[block.entries[i]]++;
  });
  return () => {
    const counts = new Map<string, number>();
    let unkSeen = 0;
    for (let entry = 0; entry < RESERVED_WORDS.length; entry++) unkSeen += entryCounts[entry];
    for (let entry = RESERVED_WORDS.length; entry < table.size; entry++) counts.set(table.word(entry), entryCounts[entry]);
    counts.set('<unk>', unkSeen);
    return counts;
  };
}

function sameCounts(oldCounts: WordCounts, newCounts: WordCounts): void {
  const a = oldCounts();
  const b = newCounts();
  if (a.size !== b.size) fail(`vocabulary: ${a.size} words old, ${b.size} new`);
  for (const [word, count] of a) if (b.get(word) !== count) fail(`vocabulary: ${JSON.stringify(word)} ${count} old, ${b.get(word)} new`);
}

/** The wrapped sentences of the chunk as one id stream plus sentence starts. */
interface IdStream { ids: Uint32Array; starts: Uint32Array; sentences: number; digest: string }

function collect(): { push(n: number, fill: (ids: Uint32Array, at: number) => void): void; done(): IdStream } {
  let ids = new Uint32Array(1 << 20);
  let starts = new Uint32Array(1 << 16);
  let used = 0;
  let sentences = 0;
  return {
    push(n, fill) {
      while (used + n + 2 > ids.length) { const g = new Uint32Array(2 * ids.length); g.set(ids); ids = g; }
      if (sentences + 2 > starts.length) { const g = new Uint32Array(2 * starts.length); g.set(starts); starts = g; }
      starts[sentences++] = used;
      fill(ids, used);
      used += n + 2;
      starts[sentences] = used;
    },
    done() {
      const digest = createHash('sha256').update(new Uint8Array(ids.buffer, 0, used * 4)).digest('hex');
      return { ids: ids.subarray(0, used), starts: starts.subarray(0, sentences + 1), sentences, digest };
    },
  };
}

let words: string[] = [];
const eosId = 1;
let unkId = 2;

async function oldIds(file: InputFile): Promise<IdStream> {
  const tokenize = old.tokenize.makeTokenizer(normalize);
  const tokens: string[] = [];
  const wordIds = new Map<string, number>();
  for (let id = 1; id < words.length; id++) wordIds.set(words[id], id);
  const out = collect();
  await old.read.readChunk(file, chunk, readOptions, (sentence: string) => {
    const n = tokenize(sentence, tokens);
    out.push(n, (ids, at) => {
      ids[at] = BOS_ID;
      for (let i = 0; i < n; i++) ids[at + i + 1] = wordIds.get(tokens[i]) ?? unkId;
      ids[at + n + 1] = eosId;
    });
  });
  return out.done();
}

async function newIds(file: InputFile): Promise<IdStream> {
  const table = WordTable.sizedFor(RESERVED_WORDS.length + words.length);
  reserveWords(table);
  const idOfEntry = new Uint32Array(RESERVED_WORDS.length + words.length).fill(unkId, 0, RESERVED_WORDS.length);
  for (let id = 1; id < words.length; id++) {
    const entry = table.internWord(words[id]);
    if (entry >= RESERVED_WORDS.length) idOfEntry[entry] = id;
  }
  const reader = new TokenReader(normalize, table, false);
  const out = collect();
  await reader.read(file, chunk, readOptions, (block) => {
    let tokenStart = 0;
    for (let s = 0; s < block.sentences; s++) {
      const tokenEnd = block.sentenceEnds[s];
      const n = tokenEnd - tokenStart;
      out.push(n, (ids, at) => {
        ids[at] = BOS_ID;
        for (let i = 0; i < n; i++) {
          const entry = block.entries[tokenStart + i];
          ids[at + i + 1] = entry < 0 ? unkId : idOfEntry[entry];
        }
        ids[at + n + 1] = eosId;
      });
      tokenStart = tokenEnd;
    }
  });
  return out.done();
}

// ---- run --------------------------------------------------------------------------------------

process.stdout.write(
  `bench-hot-path: ${fileName} (${(input.bytes / 1e6).toFixed(1)} MB, one chunk), order ${order}, ${rounds} rounds, ` +
  `old = ${values.baseline} (${baselineDir.replace(REPO + '/', '')}), new = working tree; ${os.cpus().length} cores, load ${os.loadavg()[0].toFixed(1)}\n`,
);

// The vocabulary: also the word list the later steps use (ranked as vocabulary.ts ranks it).
let vocabulary: Map<string, number> | undefined;
if (steps.has('vocabulary')) {
  await sideBySide('vocabulary pass', () => oldVocabulary(input), () => newVocabulary(input), (a, b) => {
    sameCounts(a, b);
    vocabulary = b();
  });
}
vocabulary ??= (await newVocabulary(input))();
{
  const entries = [...vocabulary].filter(([w]) => w !== '<unk>');
  entries.sort((x, y) => y[1] - x[1] || (x[0] < y[0] ? -1 : x[0] > y[0] ? 1 : 0));
  words = ['<s>', '</s>', '<unk>', ...entries.map((e) => e[0])];
  unkId = 2;
}

let stream: IdStream | undefined;
if (steps.has('ids')) {
  await sideBySide('words → ids', () => oldIds(input), () => newIds(input), (a, b) => {
    if (a.digest !== b.digest) fail(`words → ids: id streams differ (${a.digest} old, ${b.digest} new)`);
    stream = b;
  });
}
stream ??= await newIds(input);
const idStream = stream;

// Counting, as the workers do it: reserve then addSentence per sentence, one budget of 1 GiB. The
// new set is presized as a worker presizes its first chunk (from n-grams per byte), and reused
// across rounds as a worker reuses it across chunks.
type AnySet = { counters: Array<{ size: number }>; clear(): void };
let oldSetKept: AnySet | undefined;
let newSetKept: CounterSet | undefined;
function oldCount(): AnySet {
  const set: AnySet = oldSetKept ??= new old.counterSet.CounterSet(order, budgetBytes);
  set.clear();
  const typed = set as unknown as { reserve(length: number): boolean; addSentence(ids: Uint32Array, length: number): void };
  for (let s = 0; s < idStream.sentences; s++) {
    const view = idStream.ids.subarray(idStream.starts[s], idStream.starts[s + 1]);
    if (!typed.reserve(view.length)) fail('old counter set over budget');
    typed.addSentence(view, view.length);
  }
  return set;
}
function newCount(): CounterSet {
  const set = newSetKept ??= new CounterSet(order, budgetBytes, words.length);
  set.clear();
  const ngrams = idStream.ids.length - idStream.sentences;
  set.presize(Array.from({ length: order }, (_, n) => {
    const entries = n === 0 ? Math.min(ngrams, words.length) : ngrams;
    return { entries, tableEntries: n === 0 ? entries : Math.ceil(entries / 8) };
  }));
  // In batches of whole sentences, as worker.ts counts a block.
  const { ids, starts } = idStream;
  for (let s = 0; s < idStream.sentences;) {
    let end = s + 1;
    let positions = starts[end] - starts[s] - 1;
    while (end < idStream.sentences && positions + (starts[end + 1] - starts[end] - 1) <= COUNTER_BATCH_POSITIONS) {
      positions += starts[end + 1] - starts[end] - 1;
      end++;
    }
    if (!set.reserve(positions + 1)) fail('new counter set over budget');
    set.addSentences(ids, starts, s, end);
    s = end;
  }
  return set;
}
/** Occurrences counted per order (the sum of the counts); distinct n-grams are compared by the sort step. */
function oldOccurrences(set: AnySet): number[] {
  return (set as unknown as { counters: Array<{ counts: Uint32Array }> }).counters.map((c) => c.counts.reduce((sum, x) => sum + x, 0));
}
function newOccurrences(set: CounterSet): number[] {
  return set.counters.map((c) => {
    let sum = 0;
    for (let base = 0; base < c.table.length; base += c.dense ? 1 : c.stride) sum += c.table[base];
    for (let row = 0; row < c.logCount; row++) sum += c.log[row * c.stride];
    return sum;
  });
}
if (steps.has('count')) {
  await sideBySide(`count to order ${order}`, oldCount, newCount, (a, b) => {
    const [x, y] = [oldOccurrences(a), newOccurrences(b as CounterSet)];
    if (x.join() !== y.join()) fail(`count: occurrences per order ${x} old, ${y} new`);
  });
}

if (steps.has('sort')) {
  // Sorting needs filled counters; filling them is not measured. The old sort leaves its set as
  // it was; the new one consumes it (spill.ts clears the set after writing).
  const idMax = words.length;
  let oldFilled = false;
  await sideBySide(`spill sort, ${partitions} partitions`, () => {
    // As spill.ts of the baseline: the slot permutation, then each partition's rows copied out.
    const out: Array<{ keys: Uint32Array; counts: Uint32Array }> = [];
    for (const counter of (oldSetKept as unknown as { counters: Array<{ order: number; keys: Uint32Array; counts: Uint32Array }> }).counters) {
      const { slots, partitionStarts } = old.spillSort.spillOrder(counter, partitions, idMax);
      for (let p = 0; p < partitions; p++) {
        const begin = partitionStarts[p];
        const records = partitionStarts[p + 1] - begin;
        const keys = new Uint32Array(records * counter.order);
        const counts = new Uint32Array(records);
        for (let j = 0; j < records; j++) {
          const slot = slots[begin + j];
          keys.set(counter.keys.subarray(slot * counter.order, slot * counter.order + counter.order), j * counter.order);
          counts[j] = counter.counts[slot];
        }
        out.push({ keys, counts });
      }
    }
    return out;
  }, () => {
    const set = newSetKept!;
    const out: Array<{ keys: Uint32Array; counts: Uint32Array }> = [];
    for (const counter of set.counters) {
      const sorted = spillOrder(counter, partitions, idMax, set.sortScratch());
      // The views are what the run-file writer reads; the next counter's sort reuses their memory,
      // so they are copied for the check, untimed.
      const copyStart = performance.now();
      for (let p = 0; p < partitions; p++) out.push({ keys: sorted.keysOf(p).slice(), counts: sorted.countsOf(p).slice() });
      excludedMs += performance.now() - copyStart;
    }
    set.clear();
    return out;
  }, (a, b) => {
    const digest = (runs: typeof a): string => {
      const hash = createHash('sha256');
      for (const r of runs) hash.update(new Uint8Array(r.keys.buffer, r.keys.byteOffset, r.keys.byteLength)).update(new Uint8Array(r.counts.buffer, r.counts.byteOffset, r.counts.byteLength));
      return hash.digest('hex');
    };
    if (digest(a) !== digest(b)) fail('spill sort: sorted runs differ');
  }, (which) => {
    if (!oldFilled) oldCount();
    oldFilled = true;
    if (which === 'new') newCount();
  });
}

if (results.length > 1) {
  const total = (which: 'old' | 'new', key: keyof Summary): number => results.reduce((sum, r) => sum + r[which][key], 0);
  const sum = (which: 'old' | 'new'): Summary => ({ wallMsMin: total(which, 'wallMsMin'), wallMs: total(which, 'wallMs'), cpuMs: total(which, 'cpuMs') });
  print({ step: 'all steps (sum)', old: sum('old'), new: sum('new') });
}
