/**
 * Lists the n-grams of one order of a counted job: from the count store once the merge is done,
 * otherwise merged from the run files on the fly (a job whose merge was interrupted).
 * Order: lexicographic by word ids — ids rank words by count (most frequent first, ties by
 * bytes) — or, with `byCount`, by count descending (ties in id order).
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { LISTING_SORT_ENTRIES_MAX, MERGE_FAN_IN_MAX } from '../limits.ts';
import { nodeFs } from '../job/fsio.ts';
import { fewerRuns } from './fan-in.ts';
import { readManifest } from '../job/manifest.ts';
import { RunReader } from './run-file.ts';
import { mergeRuns, type BatchSource } from './run-merge.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../merge/store.ts';
import { MERGE_SCRATCH_DIR } from '../merge/merge-partition.ts';
import { readJobVocabulary } from './stage.ts';

export interface ListedNgram {
  /** Words joined by one space. */
  ngram: string;
  count: number;
}

export interface ListOptions {
  order: number;
  /** At most this many lines. */
  limit?: number;
  /** Only n-grams starting with these words. */
  prefix?: string[];
  /** List continuation counts N1+(• x) instead of raw counts (orders below the highest). */
  continuation?: boolean;
  byCount: boolean;
}

/** Min-heap of [count, sequence] by (count asc, sequence desc): the root is the weakest kept entry. */
class TopHeap {
  readonly items: Array<{ count: number; seq: number; ids: Uint32Array }> = [];
  constructor(readonly capacity: number) {}
  private weaker(a: { count: number; seq: number }, b: { count: number; seq: number }): boolean {
    return a.count < b.count || (a.count === b.count && a.seq > b.seq);
  }
  offer(count: number, seq: number, ids: () => Uint32Array): void {
    const items = this.items;
    if (items.length < this.capacity) {
      items.push({ count, seq, ids: ids() });
      let i = items.length - 1;
      while (i > 0) {
        const parent = (i - 1) >> 1;
        if (!this.weaker(items[i], items[parent])) break;
        [items[i], items[parent]] = [items[parent], items[i]];
        i = parent;
      }
      return;
    }
    if (!this.weaker(items[0], { count, seq })) return;
    items[0] = { count, seq, ids: ids() };
    let i = 0;
    for (;;) {
      const l = 2 * i + 1;
      const r = l + 1;
      let m = i;
      if (l < items.length && this.weaker(items[l], items[m])) m = l;
      if (r < items.length && this.weaker(items[r], items[m])) m = r;
      if (m === i) break;
      [items[i], items[m]] = [items[m], items[i]];
      i = m;
    }
  }
}

export async function* listNgrams(jobDir: string, options: ListOptions): AsyncGenerator<ListedNgram> {
  const manifest = await readManifest(jobDir);
  if (!manifest) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  if (manifest.stages.count.status !== 'done' || (manifest.stages.merge.status !== 'done' && options.prefix?.length)) {
    throw new QuernError('config', `the count in ${jobDir} has not finished; re-run the same quern count command to complete it`);
  }
  const order = options.order;
  if (!Number.isInteger(order) || order < 1 || order > manifest.config.order) {
    throw new QuernError('config', `--order must be from 1 to ${manifest.config.order} for this job, got ${order}`);
  }
  if (options.continuation) {
    if (manifest.stages.continuation?.status !== 'done') throw new QuernError('config', `the continuation counts of ${jobDir} are not finished; re-run the same quern count command`);
    if (order >= manifest.config.order) throw new QuernError('config', `continuation counts exist for orders below the highest (1 to ${manifest.config.order - 1})`);
  }
  const vocab = await readJobVocabulary(jobDir, manifest);
  const words = vocab.words;
  let readers: BatchSource[];
  let stores: PartitionStore[] = [];
  let scratch: string | undefined;
  try {
    if (manifest.stages.merge.status === 'done') {
      let prefix: Uint32Array | undefined;
      if (options.prefix && options.prefix.length > 0) {
        if (options.prefix.length > order) throw new QuernError('config', `--prefix has ${options.prefix.length} words, more than the order ${order}`);
        const ids = new Map(words.map((w, id) => [w, id]));
        const missing = options.prefix.filter((w) => !ids.has(w));
        if (missing.length > 0) return; // a word outside the vocabulary: no n-gram starts with it
        prefix = Uint32Array.from(options.prefix, (w) => ids.get(w)!);
      }
      stores = Array.from({ length: manifest.config.partitions }, (_, p) => PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read'));
      readers = stores.map((store) => new StoreSource(store, order, prefix, options.continuation ? 'continuation' : 'raw'));
    } else {
      let files = manifest.stages.count.chunks.flatMap((c) => c.runs).filter((r) => r.order === order).map((r) => path.join(jobDir, r.file));
      if (files.length > MERGE_FAN_IN_MAX) {
        // Every partition's runs at once (the merge takes one partition at a time): grouped first,
        // beside the merge's own intermediates (removed below, or by the merge stage's end).
        scratch = path.join(jobDir, MERGE_SCRATCH_DIR, `listing-${process.pid}-${Date.now()}`);
        files = await fewerRuns({ files, order, slots: MERGE_FAN_IN_MAX, fanIn: MERGE_FAN_IN_MAX, scratchDir: scratch, partition: 0, fs: nodeFs });
      }
      readers = await RunReader.openAll(files);
    }
    yield* listMerged(readers, order, words, options);
  } finally {
    await Promise.all(stores.map((s) => s.close()));
    if (scratch !== undefined) {
      await fsp.rm(scratch, { recursive: true, force: true });
      // And merge-scratch/ itself when nothing else is in it (a merge's own folders stay).
      await fsp.rmdir(path.dirname(scratch)).catch(() => undefined);
    }
  }
}

async function* listMerged(readers: BatchSource[], order: number, words: string[], options: ListOptions): AsyncGenerator<ListedNgram> {
  const text = (ids: ArrayLike<number>, offset: number): string => {
    let s = words[ids[offset]];
    for (let k = 1; k < order; k++) s += ' ' + words[ids[offset + k]];
    return s;
  };
  const limit = options.limit ?? Infinity;
  if (!options.byCount) {
    let emitted = 0;
    for await (const batch of mergeRuns(readers, order)) {
      for (let j = 0; j < batch.recordCount; j++) {
        if (emitted >= limit) return;
        yield { ngram: text(batch.keys, j * order), count: batch.counts[j] };
        emitted++;
      }
    }
    return;
  }
  const capacity = Number.isFinite(limit) ? limit : LISTING_SORT_ENTRIES_MAX;
  const heap = new TopHeap(capacity);
  let seq = 0;
  for await (const batch of mergeRuns(readers, order)) {
    for (let j = 0; j < batch.recordCount; j++) {
      if (!Number.isFinite(limit) && seq >= LISTING_SORT_ENTRIES_MAX) {
        throw new QuernError('limit', `more than ${LISTING_SORT_ENTRIES_MAX} n-grams of order ${order}: give --limit to list the most frequent ones`);
      }
      const at = j * order;
      heap.offer(batch.counts[j], seq++, () => batch.keys.slice(at, at + order));
    }
  }
  const sorted = heap.items.sort((a, b) => b.count - a.count || a.seq - b.seq);
  for (const item of sorted) yield { ngram: text(item.ids, 0), count: item.count };
}
