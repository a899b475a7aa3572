/**
 * `quern score`: perplexity of a packed model on inputs read like `quern count` reads them (plain,
 * gzip, JSON Lines), and on standard input (`-`), per file and in total; with --per-line, one JSON
 * record per line (or per JSON Lines document) for filtering training data by perplexity.
 */
import os from 'node:os';
import type { CommandModule } from 'yargs';
import { assert, QuernError } from '../errors.ts';
import { discoverInputs } from '../corpus/discover.ts';
import { planChunks } from '../corpus/plan.ts';
import { openStdin, splitStdinSpec, STDIN_SPEC, type StdinInput } from '../corpus/stdin.ts';
import { TextPieces } from '../corpus/text-pieces.ts';
import { TextStream } from '../corpus/text-stream.ts';
import { inputBytesOf, isChunkPiece, type Chunk, type InputFile, type NormalizeOptions, type SkippedSample } from '../corpus/types.ts';
import { openModel, type PackedModel } from '../pack/reader.ts';
import { WorkerPool, type TaskSource } from '../count/pool.ts';
import type { ScoreChunkDone } from '../count/protocol.ts';
import type { ProgressSink } from '../job/context.ts';
import { SCORE_CHUNK_BYTES } from '../limits.ts';
import { corpusOptions } from './count.ts';
import { intInRange, parseSize } from './options.ts';
import { makeProgress } from './progress.ts';
import { writeOut } from './write-out.ts';
import { describeNormalize, resolveNormalize } from '../score/normalization.ts';
import { withPerplexities, type PerplexityResult, type PerplexitySums } from '../score/perplexity.ts';
import { scoreChunk, type ChunkScore, type ScoreSettings } from '../score/score-chunk.ts';
import { InOrder } from '../score/in-order.ts';

/** One file's (or the total's) sums and perplexities, and the bad lines skipped (--skip-bad). */
interface Totals extends PerplexityResult {
  file: string;
  skipped: number;
  /** The first bad line skipped, if any. */
  firstSkipped?: SkippedSample;
}

/** How `scoreInputs` reads, splits and reports. */
export interface ScoreRun {
  normalize: NormalizeOptions;
  textField: string | undefined;
  skipBad: boolean;
  /** 'text' or 'jsonl' for every input, or undefined: by each file's name (standard input: text). */
  format: 'text' | 'jsonl' | undefined;
  /** Worker threads; 1 scores in this thread. The model must be opened `{ shared: true }` for more. */
  workers: number;
  chunkBytes: number;
  progress: ProgressSink;
  /** Per-sentence records as JSON lines, in input order, a chunk's at a time, when given. */
  onLines?: (text: string) => Promise<void> | void;
}

/**
 * Scores every sentence of the inputs, chunk by chunk (line-aligned byte ranges of `chunkBytes`; a
 * gzip file's decompressed text, and standard input, cut the same way as they are read,
 * ScoreTasks), on `workers` threads; each file's sums are its chunks' sums added in chunk order, so
 * the result does not depend on `workers`. Standard input (the spec `-`, at most once) comes first,
 * named `-`; its format is `run.format`, or text.
 */
export async function scoreInputs(model: PackedModel, specs: string[], run: ScoreRun): Promise<{ files: Totals[]; total: Totals }> {
  if (!model.normalised) throw new QuernError('config', `perplexity needs a normalised model; this ${model.parameters.method} model gives scores, not probabilities`);
  const { stdin: readsStdin, files: fileSpecs } = splitStdinSpec(specs);
  const stdinFormat = run.format ?? 'text';
  // discoverInputs refuses no specs at all; `-` alone is no file.
  const found = readsStdin && fileSpecs.length === 0 ? [] : await discoverInputs(fileSpecs, run.format === undefined ? {} : { format: run.format });
  if ((found.some((f) => f.format === 'jsonl') || (readsStdin && stdinFormat === 'jsonl')) && run.textField === undefined) {
    throw new QuernError('config', 'JSON Lines input: say where the text is with --text-field');
  }
  const settings: ScoreSettings = { normalize: run.normalize, textField: run.textField?.split('.'), skipBad: run.skipBad, perLine: run.onLines !== undefined };
  const stdin = readsStdin ? await openStdin(stdinFormat) : undefined;
  const inputs = stdin === undefined ? found : [stdin.input, ...found];
  let chunks: Chunk[];
  try {
    chunks = await planChunks(inputs, run.chunkBytes);
  } catch (error) {
    stdin?.source.destroy();
    throw error;
  }
  const tasks = new ScoreTasks(inputs, chunks, run.chunkBytes, stdin);
  const files = inputs.map((file) => totals(file.path));
  // Sentences and lines of each file's chunks consumed so far (per-line records number sentences
  // from 1 within a file; a skipped line's number is its file's earlier lines + its line in its chunk).
  const sentencesBefore = new Array<number>(inputs.length).fill(0);
  const linesBefore = new Array<number>(inputs.length).fill(0);
  const sums = inputs.map((): PerplexitySums => ({ sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0 }));
  const consume = async (result: ChunkScore): Promise<void> => {
    const fileIndex = tasks.fileOf[result.chunk];
    const t = files[fileIndex];
    for (const k of ['sentences', 'tokens', 'oov', 'log10Prob', 'log10ProbWithUnk'] as const) sums[fileIndex][k] += result.sums[k];
    t.skipped += result.reads.skipped;
    const first = result.reads.skippedSamples[0];
    if (t.firstSkipped === undefined && first !== undefined) {
      t.firstSkipped = { line: first.line ?? linesBefore[fileIndex] + first.lineInChunk, byteOffset: first.byteOffset, reason: first.reason };
    }
    if (run.onLines !== undefined && result.records !== null && result.records.tokens.length > 0) {
      const { tokens, oov, log10Prob, log10ProbWithUnk, line, sentences, documents } = result.records;
      const records: string[] = [];
      for (let i = 0; i < tokens.length; i++) {
        // A sentence of plain text by its number and line in the file; a JSON Lines document by its line.
        const where = documents
          ? { line: linesBefore[fileIndex] + line[i], sentences: sentences[i] }
          : { sentence: sentencesBefore[fileIndex] + i + 1, line: linesBefore[fileIndex] + line[i] };
        records.push(JSON.stringify({
          file: t.file, ...where, tokens: tokens[i], oov: oov[i], log10Prob: log10Prob[i],
          perplexity: 10 ** (-log10Prob[i] / Math.max(1, tokens[i] - oov[i])),
          perplexityWithUnk: 10 ** (-log10ProbWithUnk[i] / tokens[i]),
        }));
      }
      await run.onLines(records.join('\n') + '\n');
    }
    sentencesBefore[fileIndex] += result.sums.sentences;
    linesBefore[fileIndex] += result.reads.lines;
  };
  // Standard input's size is not known: neither is the total then.
  const totalBytes = chunks.reduce((sum, chunk) => sum + chunk.byteEnd - chunk.byteStart, 0);
  run.progress.start('scoring', stdin === undefined ? totalBytes : undefined);
  try {
    if (run.workers > 1 && (chunks.length > 1 || inputs.some(isStreamed))) await scoreInWorkers(model, inputs, tasks, settings, run, consume);
    else {
      for (let chunk = await tasks.next(); chunk !== undefined; chunk = await tasks.next()) {
        const result = await scoreChunk(model, inputs[chunk.fileIndex], chunk, settings);
        run.progress.update(inputBytesOf(chunk), result.sums.tokens);
        await consume(result);
      }
    }
    // A gzip file that broke off: reported once every piece before the break was scored.
    tasks.throwIfFailed();
  } finally {
    await tasks.close();
    run.progress.stop();
  }
  const total = totals('total');
  for (const [index, t] of files.entries()) {
    Object.assign(t, withPerplexities(sums[index]));
    for (const k of ['sentences', 'tokens', 'oov', 'log10Prob', 'log10ProbWithUnk', 'skipped'] as const) total[k] += t[k];
  }
  return { files, total: { ...total, ...withPerplexities(total) } };
}

/** Whether `file` is cut into pieces as it is read (a gzip file, standard input), not planned. */
function isStreamed(file: InputFile): boolean {
  return file.gzip || file.stdin === true;
}

function totals(file: string): Totals {
  return { file, sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0, perplexity: NaN, perplexityWithUnk: NaN, skipped: 0 };
}

/**
 * The units of `quern score`'s work, in input order, numbered from 0: the planned chunks of plain
 * files, and the pieces of each gzip file and of standard input (TextPieces, cut where its text as
 * a plain file would be chunked, so an input scores the same compressed or not, piped or not), cut
 * as they are asked for with one piece cut ahead. A stream that breaks off ends the tasks there;
 * `throwIfFailed` gives its error.
 */
class ScoreTasks implements TaskSource<Chunk> {
  /** The input of each task handed out, by task index. */
  readonly fileOf: number[] = [];
  private planned = 0;
  private pieces: TextPieces | undefined;
  private ahead: Promise<Chunk | undefined> | undefined;
  private failure: { error: unknown } | undefined;
  private done = false;

  /** @param stdin standard input, when it is one of `inputs` (destroyed by `close` whatever was read) */
  constructor(private readonly inputs: InputFile[], private readonly chunks: Chunk[], private readonly pieceBytes: number, private readonly stdin: StdinInput | undefined) {}

  async next(): Promise<Chunk | undefined> {
    const task = await (this.ahead ?? this.make());
    this.ahead = task === undefined ? undefined : this.make();
    return task;
  }

  /** The chunks planned, a gzip file counting as one. */
  get plannedChunks(): number {
    return this.chunks.length;
  }

  throwIfFailed(): void {
    if (this.failure !== undefined) throw this.failure.error;
  }

  async close(): Promise<void> {
    this.done = true;
    // The stream first: a piece being cut from a pipe that gives no more then ends too.
    await this.pieces?.close();
    await this.ahead;
    await this.pieces?.close();
    this.stdin?.source.destroy();
  }

  private async make(): Promise<Chunk | undefined> {
    try {
      for (;;) {
        if (this.done) return undefined;
        if (this.pieces !== undefined) {
          const piece = await this.pieces.next();
          if (piece !== undefined) return this.handOut(piece);
          await this.pieces.close();
          this.pieces = undefined;
        }
        if (this.planned === this.chunks.length) {
          this.done = true;
          return undefined;
        }
        const chunk = this.chunks[this.planned++];
        const file = this.inputs[chunk.fileIndex];
        if (file.stdin === true) {
          assert(this.stdin?.input === file, 'standard input is an input only with its stream');
          this.pieces = new TextPieces(new TextStream(file, this.stdin.source, undefined), chunk.fileIndex, this.pieceBytes, this.fileOf.length);
        } else if (file.gzip) this.pieces = TextPieces.ofFile(file, chunk.fileIndex, this.pieceBytes, this.fileOf.length);
        else return this.handOut({ ...chunk, index: this.fileOf.length });
      }
    } catch (error) {
      this.failure = { error };
      this.done = true;
      return undefined;
    }
  }

  private handOut(chunk: Chunk): Chunk {
    this.fileOf.push(chunk.fileIndex);
    return chunk;
  }
}

/** The chunks scored by worker threads that share the model's memory, consumed in chunk order. */
async function scoreInWorkers(
  model: PackedModel, inputs: InputFile[], tasks: ScoreTasks, settings: ScoreSettings, run: ScoreRun, consume: (result: ChunkScore) => Promise<void>,
): Promise<void> {
  // As many workers as there are chunks, or all of them for the pieces of a gzip file or of
  // standard input (not counted ahead).
  const pool = new WorkerPool(inputs.some(isStreamed) ? run.workers : Math.min(run.workers, tasks.plannedChunks));
  const inOrder = new InOrder<ChunkScore>(consume);
  try {
    await pool.run(
      {
        phase: 'score', jobDir: '', inputs, textField: settings.textField, skipBad: settings.skipBad, normalize: settings.normalize, order: model.order, partitions: 0,
        score: { model: model.shareable(), settings },
      },
      tasks,
      {
        message: (chunk) => ({ type: 'chunk', chunk }),
        // A piece's bytes move to the worker (no copy).
        transfer: (chunk) => (isChunkPiece(chunk) ? [chunk.data.buffer as ArrayBuffer] : []),
        onProgress: (bytes, tokens) => run.progress.update(bytes, tokens),
        // The worker gets its next chunk once this one's turn has come and it has been consumed.
        onDone: (done: ScoreChunkDone) => inOrder.offer(done.chunk, done),
      },
    );
  } finally {
    await pool.close();
  }
}

/**
 * Refuses the inputs that are options (`-x`, `--typo`; not `-`) with yargs' message for unknown
 * arguments, as a usage error (src/cli/main.ts: status 2, then "See quern --help"). An unknown
 * option before the model leaves the model empty (yargs parses it as `--model --typo`), its name lost.
 */
function unknownOptions(model: string, inputs: string[]): void {
  const usage = (message: string): Error => Object.assign(new Error(message), { usage: true });
  if (model === '') throw usage('Unknown argument before <model>, or an empty model path');
  const options = inputs.filter((spec) => spec.startsWith('-') && spec !== STDIN_SPEC).map((spec) => spec.replace(/^-+/, '').replace(/=[^]*$/, ''));
  if (options.length > 0) throw usage(`Unknown argument${options.length > 1 ? 's' : ''}: ${options.join(', ')}`);
}

export const scoreCommand: CommandModule = {
  command: 'score <model> <inputs..>',
  describe: 'Perplexity of a model file on text (plain, gzip, JSON Lines), per file and in total',
  builder: (yargs) => corpusOptions(yargs
    // yargs drops a `-` among the inputs (it parses the positionals again as `--inputs -`, where a
    // lone `-` reads as an option and ends the list). Taken as arguments, unknown options reach the
    // inputs too, and the handler refuses them first, as yargs' strict mode would (unknownOptions).
    .parserConfiguration({ 'unknown-options-as-args': true })
    .positional('model', { type: 'string', describe: 'A model file written by quern estimate, build or pack' })
    .positional('inputs', { type: 'string', array: true, describe: 'Files, directories or glob patterns; - for standard input, named - in the results (text, or JSON Lines with --format jsonl; gzip known by its first bytes)' })
    .option('per-line', { type: 'boolean', default: false, describe: 'Print one JSON record per sentence of plain text (its number and line in the file), or per JSON Lines document (its line; the sums over the lines of its text)' })
    .option('json', { type: 'boolean', default: false, describe: 'Print the totals as one JSON object' })
    .option('workers', { type: 'number', default: os.availableParallelism(), describe: 'Worker threads (they share the model\'s memory); 1 scores in the main thread' })
    .option('chunk-size', { type: 'string', default: String(SCORE_CHUNK_BYTES), describe: 'Split plain inputs into line-aligned chunks of about this size, the unit of work of a worker' })
    .option('quiet', { type: 'boolean', default: false, describe: 'No progress display' }), false)
    .example('$0 score job/model.qm heldout/', 'Perplexity on held-out text, normalised as the model file records it')
    .example('zcat shard.gz | $0 score job/model.qm - --per-line', 'One record per sentence of the text piped in'),
  handler: async (argv) => {
    unknownOptions(argv.model as string, argv.inputs as string[]);
    const workers = intInRange(argv.workers, '--workers', 1, 256);
    const chunkBytes = parseSize(argv['chunk-size'] as string, '--chunk-size');
    const model = await openModel(argv.model as string, { shared: workers > 1 });
    const given = { lowercase: argv.lowercase as boolean | undefined, unicode: argv.unicode as NormalizeOptions['unicode'] | undefined, split: argv.split as NormalizeOptions['split'] | undefined };
    const { normalize, source } = resolveNormalize(model.normalize, given);
    const out = process.stdout;
    const format = argv.format === 'text' || argv.format === 'jsonl' ? argv.format : undefined;
    const { files, total } = await scoreInputs(model, argv.inputs as string[], {
      normalize, textField: argv['text-field'] as string | undefined, skipBad: Boolean(argv['skip-bad']), format, workers, chunkBytes,
      progress: makeProgress(argv.quiet ? 'quiet' : 'auto'),
      onLines: argv['per-line'] ? (text) => writeOut(out, text) : undefined,
    });
    if (argv['per-line']) return;
    if (argv.json) {
      out.write(JSON.stringify({ normalize, normalizeSource: source, files, total }, null, 2) + '\n');
      return;
    }
    out.write(`normalisation: ${describeNormalize(normalize)} (${source === 'model' ? 'as the model file records it' : 'the model file records none: as given'})\n`);
    for (const t of [...files, total]) {
      out.write(`${t.file}\n  ${t.sentences} sentences, ${t.tokens} tokens (${t.oov} OOV), log10 p ${t.log10Prob.toFixed(2)}, ` +
        `perplexity ${t.perplexity.toFixed(2)} without OOVs, ${t.perplexityWithUnk.toFixed(2)} with OOVs as <unk>\n`);
      if (t.skipped > 0) {
        const first = t.firstSkipped;
        out.write(`  skipped ${t.skipped} bad lines or records${first ? ` (first: ${first.line !== undefined ? `line ${first.line}` : `byte ${first.byteOffset}`}, ${first.reason})` : ''}\n`);
      }
    }
  },
};
