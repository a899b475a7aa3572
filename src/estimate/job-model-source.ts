/**
 * The model a streaming estimate left in a job, as a ModelSource (model-source.ts), and a helper
 * that materialises any ModelSource into an in-memory LanguageModel.
 *
 * Order 1 is the whole-job unigram file joined with the back-off weights of the contexts of one
 * word, which the partitions wrote (V rows: gathered densely). Order m ≥ 2 is a k-way merge of the
 * partitions' sorted probability files into global ascending order, joined with a k-way merge of
 * their back-off files of order m (every back-off row is a row of the model; a row without one has
 * weight 1, log10 0). Memory: one block per file and one output batch.
 */
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { readJobVocabulary } from '../count/stage.ts';
import { readManifest, type EstimateStage } from '../job/manifest.ts';
import { ESTIMATE_SOURCE_BATCH_ROWS } from '../limits.ts';
import { vocabularySize } from './counts.ts';
import { checkModel, type LanguageModel, type ModelOrder } from './model.ts';
import type { ModelRowBatch, ModelSource } from './model-source.ts';
import { resultFilePath, type ResultFileRecord } from './partition-estimate.ts';
import { RESULT_WHOLE_JOB, ResultReader, type ResultBatch, type ResultKind } from './result-file.ts';

/** Merges sorted result files of one order into ascending order (their rows are disjoint). */
class ResultMerger {
  private readonly batches: Array<ResultBatch | null>;
  private readonly indexes: Int32Array;
  /** Binary heap of source indexes, smallest current row first. */
  private readonly heap: Int32Array;
  private heapSize = 0;

  private constructor(private readonly readers: ResultReader[], readonly order: number) {
    this.batches = new Array<ResultBatch | null>(readers.length).fill(null);
    this.indexes = new Int32Array(readers.length);
    this.heap = new Int32Array(readers.length);
  }

  static async open(readers: ResultReader[], order: number): Promise<ResultMerger> {
    const merger = new ResultMerger(readers, order);
    for (let s = 0; s < readers.length; s++) {
      merger.batches[s] = await readers[s].nextBatch();
      if (merger.batches[s] !== null) merger.push(s);
    }
    return merger;
  }

  private less(a: number, b: number): boolean {
    const order = this.order;
    const x = this.batches[a]!.ids;
    const y = this.batches[b]!.ids;
    const xa = this.indexes[a] * order;
    const yb = this.indexes[b] * order;
    for (let j = 0; j < order; j++) {
      if (x[xa + j] !== y[yb + j]) return x[xa + j] < y[yb + j];
    }
    assert(false, `the partitions' rows of order ${order} are disjoint`);
  }

  private push(s: number): void {
    const heap = this.heap;
    let i = this.heapSize++;
    heap[i] = s;
    while (i > 0) {
      const parent = (i - 1) >> 1;
      if (!this.less(heap[i], heap[parent])) break;
      [heap[i], heap[parent]] = [heap[parent], heap[i]];
      i = parent;
    }
  }

  private siftDown(): void {
    const heap = this.heap;
    const size = this.heapSize;
    let i = 0;
    for (;;) {
      const left = 2 * i + 1;
      if (left >= size) break;
      let child = left;
      if (left + 1 < size && this.less(heap[left + 1], heap[left])) child = left + 1;
      if (!this.less(heap[child], heap[i])) break;
      [heap[i], heap[child]] = [heap[child], heap[i]];
      i = child;
    }
  }

  /** True when rows are left. */
  get more(): boolean {
    return this.heapSize > 0;
  }

  /** The smallest current row: its batch and row index (valid until `advance`). */
  peek(): { batch: ResultBatch; row: number } {
    const s = this.heap[0];
    return { batch: this.batches[s]!, row: this.indexes[s] };
  }

  /** Moves past the smallest current row. */
  async advance(): Promise<void> {
    const s = this.heap[0];
    if (++this.indexes[s] === this.batches[s]!.rows) {
      this.batches[s] = await this.readers[s].nextBatch();
      this.indexes[s] = 0;
      if (this.batches[s] === null) {
        this.heap[0] = this.heap[--this.heapSize];
        if (this.heapSize > 0) this.siftDown();
        return;
      }
    }
    this.siftDown();
  }

  async close(): Promise<void> {
    await Promise.all(this.readers.map((r) => r.close()));
  }
}

function compareAt(a: Uint32Array, aOffset: number, b: Uint32Array, bOffset: number, order: number): number {
  for (let j = 0; j < order; j++) {
    if (a[aOffset + j] !== b[bOffset + j]) return a[aOffset + j] < b[bOffset + j] ? -1 : 1;
  }
  return 0;
}

function finishedStage(jobDir: string, stage: EstimateStage | undefined): Required<Pick<EstimateStage, 'header' | 'unigrams'>> & EstimateStage {
  if (stage?.status !== 'done' || stage.header === undefined || stage.unigrams === undefined) {
    throw new QuernError('config', `the job in ${jobDir} holds no finished estimate; run quern estimate first`);
  }
  return stage as Required<Pick<EstimateStage, 'header' | 'unigrams'>> & EstimateStage;
}

/** The model of the job's finished streaming estimate, read order by order from its result files. */
export async function openJobModelSource(jobDir: string): Promise<ModelSource> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json)`);
  const stage = finishedStage(jobDir, job.stages.estimate);
  const vocab = await readJobVocabulary(jobDir, job);
  const vocabulary = { words: vocab.words, eosId: vocab.eosId, unkId: vocab.unkId };
  const size = vocabularySize(vocabulary);
  const orderMax = stage.header.cutoffs.length;
  const byOrder = (kind: ResultKind, order: number): ResultFileRecord[] =>
    stage.partitionsDone.flatMap((p) => p.files.filter((f) => f.kind === kind && f.order === order).map((f) => ({ ...f, partition: p.partition })));
  const partitionOf = (record: ResultFileRecord): number => Number((record as ResultFileRecord & { partition: number }).partition);
  const open = (record: ResultFileRecord): Promise<ResultReader> =>
    ResultReader.open(path.join(jobDir, record.file), { kind: record.kind, order: record.order, partition: partitionOf(record) }, record);
  const rowCounts = [size + 1];
  for (let m = 2; m <= orderMax; m++) rowCounts.push(byOrder('probabilities', m).reduce((sum, f) => sum + f.rows, 0));
  assert(stage.unigrams.rows === size + 1, 'the unigram results hold every id 0..V');

  async function* unigramRows(): AsyncIterable<ModelRowBatch> {
    const backOff = new Float64Array(size + 1);
    for (const record of byOrder('back-off', 1)) {
      const reader = await open(record);
      for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
        for (let r = 0; r < batch.rows; r++) backOff[batch.ids[r]] = batch.values[r];
      }
    }
    const unigrams = await ResultReader.open(path.join(jobDir, stage.unigrams.file), { kind: 'probabilities', order: 1, partition: RESULT_WHOLE_JOB }, stage.unigrams);
    let id = 0;
    for (let batch = await unigrams.nextBatch(); batch !== null; batch = await unigrams.nextBatch()) {
      for (let r = 0; r < batch.rows; r++) {
        if (batch.ids[r] !== id + r) throw new QuernError('corrupt', `${unigrams.filePath}: row ${id + r} holds id ${batch.ids[r]}`);
      }
      yield { rows: batch.rows, ids: batch.ids, log10Prob: batch.values, log10BackOff: backOff.slice(id, id + batch.rows) };
      id += batch.rows;
    }
  }

  async function* orderRows(order: number): AsyncIterable<ModelRowBatch> {
    const probs = await ResultMerger.open(await Promise.all(byOrder('probabilities', order).map(open)), order);
    const backOffs = await ResultMerger.open(await Promise.all(byOrder('back-off', order).map(open)), order);
    try {
      let ids = new Uint32Array(ESTIMATE_SOURCE_BATCH_ROWS * order);
      let log10Prob = new Float64Array(ESTIMATE_SOURCE_BATCH_ROWS);
      let log10BackOff = new Float64Array(ESTIMATE_SOURCE_BATCH_ROWS);
      let rows = 0;
      while (probs.more) {
        const { batch, row } = probs.peek();
        ids.set(batch.ids.subarray(row * order, (row + 1) * order), rows * order);
        log10Prob[rows] = batch.values[row];
        log10BackOff[rows] = 0;
        if (backOffs.more) {
          const head = backOffs.peek();
          const c = compareAt(head.batch.ids, head.row * order, batch.ids, row * order, order);
          if (c < 0) throw new QuernError('corrupt', `${jobDir}: a back-off weight of order ${order} belongs to no row of the model; re-run quern estimate with --restart`);
          if (c === 0) {
            log10BackOff[rows] = head.batch.values[head.row];
            await backOffs.advance();
          }
        }
        rows++;
        await probs.advance();
        if (rows === ESTIMATE_SOURCE_BATCH_ROWS) {
          yield { rows, ids, log10Prob, log10BackOff };
          ids = new Uint32Array(ESTIMATE_SOURCE_BATCH_ROWS * order);
          log10Prob = new Float64Array(ESTIMATE_SOURCE_BATCH_ROWS);
          log10BackOff = new Float64Array(ESTIMATE_SOURCE_BATCH_ROWS);
          rows = 0;
        }
      }
      if (backOffs.more) throw new QuernError('corrupt', `${jobDir}: a back-off weight of order ${order} belongs to no row of the model; re-run quern estimate with --restart`);
      if (rows > 0) yield { rows, ids: ids.subarray(0, rows * order), log10Prob: log10Prob.subarray(0, rows), log10BackOff: log10BackOff.subarray(0, rows) };
    } finally {
      await probs.close();
      await backOffs.close();
    }
  }

  return {
    header: { ...stage.header, vocabulary },
    rowCounts,
    rows(order: number): AsyncIterable<ModelRowBatch> {
      assert(Number.isInteger(order) && order >= 1 && order <= orderMax, `order in [1, ${orderMax}]`);
      return order === 1 ? unigramRows() : orderRows(order);
    },
  };
}

/**
 * Reads a whole ModelSource into an in-memory LanguageModel (for tests, and for packing until the
 * model file is written from a source directly): every order's rows, and each row's context row,
 * found by one walk since contexts ascend with their rows.
 */
export async function materialiseModel(source: ModelSource): Promise<LanguageModel> {
  const orders: ModelOrder[] = [];
  for (let order = 1; order <= source.rowCounts.length; order++) {
    const total = source.rowCounts[order - 1];
    const ids = new Uint32Array(total * order);
    const log10Prob = new Float64Array(total);
    const log10BackOff = new Float64Array(total);
    let rows = 0;
    for await (const batch of source.rows(order)) {
      if (rows + batch.rows > total) throw new QuernError('corrupt', `the model source yields more rows of order ${order} than its ${total}`);
      ids.set(batch.ids.subarray(0, batch.rows * order), rows * order);
      log10Prob.set(batch.log10Prob.subarray(0, batch.rows), rows);
      log10BackOff.set(batch.log10BackOff.subarray(0, batch.rows), rows);
      rows += batch.rows;
    }
    if (rows !== total) throw new QuernError('corrupt', `the model source yields ${rows} rows of order ${order}, not ${total}`);
    const contextRow = new Uint32Array(order === 1 ? 0 : total);
    if (order > 1) {
      const shorter = orders[order - 2];
      const shorterRows = shorter.log10Prob.length;
      let context = 0;
      for (let row = 0; row < total; row++) {
        while (context < shorterRows && compareAt(shorter.ids, context * (order - 1), ids, row * order, order - 1) < 0) context++;
        if (!(context < shorterRows && compareAt(shorter.ids, context * (order - 1), ids, row * order, order - 1) === 0)) {
          throw new QuernError('corrupt', `the context of a row of order ${order} is not a row of order ${order - 1}`);
        }
        contextRow[row] = context;
      }
    } else {
      assert(ids[BOS_ID] === BOS_ID, 'order 1 starts with <s>');
    }
    orders.push({ order, ids, log10Prob, log10BackOff, contextRow });
  }
  const model: LanguageModel = { ...source.header, orders };
  checkModel(model);
  return model;
}
