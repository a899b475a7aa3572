/**
 * One chunk of an input (a line-aligned byte range, src/corpus/plan.ts) read, tokenised and scored:
 * the unit of `quern score`'s work, done in the main thread or in a worker (src/count/worker.ts,
 * phase 'score') alike. Its sums are added sentence by sentence in order, and the command adds the
 * chunks' sums in chunk order, so the totals do not depend on how many threads scored them.
 */
import { readChunk, type ChunkReadStats } from '../corpus/read.ts';
import { makeTokenizer } from '../corpus/tokenize.ts';
import type { Chunk, InputFile, NormalizeOptions } from '../corpus/types.ts';
import type { PackedModel } from '../pack/reader.ts';
import { BatchScorer } from './batch.ts';
import type { PerplexitySums } from './perplexity.ts';

/** How the chunks of one `quern score` run are read and what is kept of them. */
export interface ScoreSettings {
  normalize: NormalizeOptions;
  /** JSON Lines: the text field's path. */
  textField: string[] | undefined;
  skipBad: boolean;
  /** Keep each sentence's figures (ChunkScore.lines), for per-line records. */
  perLine: boolean;
}

/** Per sentence of a chunk, in order: what its per-line record reports. */
export interface SentenceFigures {
  tokens: Int32Array;
  oov: Int32Array;
  log10Prob: Float64Array;
  log10ProbWithUnk: Float64Array;
}

/** A scored chunk (structured-clone safe, for a worker's reply). */
export interface ChunkScore {
  chunk: number;
  sums: PerplexitySums;
  /** What reading saw (a skipped line's number within the chunk: `lineInChunk`). */
  reads: ChunkReadStats;
  /** Null unless ScoreSettings.perLine. */
  lines: SentenceFigures | null;
}

/** Scores `chunk` of `file` with `model` (a normalised one: the caller checks). */
export async function scoreChunk(model: PackedModel, file: InputFile, chunk: Chunk, settings: ScoreSettings): Promise<ChunkScore> {
  const sums: PerplexitySums = { sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0 };
  const tokens: number[] = [];
  const oov: number[] = [];
  const log10Prob: number[] = [];
  const log10ProbWithUnk: number[] = [];
  // Sentences are scored in groups of up to SCORE_BATCH_TOKENS tokens, many at once (a model file
  // of SCORE_BATCH_MODEL_BYTES_MIN or more; src/score/batch.ts), and come back in order.
  const scorer = new BatchScorer(model, (score) => {
    sums.sentences++;
    sums.tokens += score.tokens.length;
    sums.oov += score.oov;
    sums.log10Prob += score.log10Prob;
    sums.log10ProbWithUnk += score.log10ProbWithUnk;
    if (!settings.perLine) return;
    tokens.push(score.tokens.length);
    oov.push(score.oov);
    log10Prob.push(score.log10Prob);
    log10ProbWithUnk.push(score.log10ProbWithUnk);
  });
  const tokenize = makeTokenizer(settings.normalize);
  const words: string[] = [];
  const reads = await readChunk(file, chunk, { format: file.format, textField: settings.textField, skipBad: settings.skipBad }, (sentence) => {
    const n = tokenize(sentence, words);
    scorer.add(words.slice(0, n));
  });
  scorer.flush();
  const lines = settings.perLine
    ? { tokens: Int32Array.from(tokens), oov: Int32Array.from(oov), log10Prob: Float64Array.from(log10Prob), log10ProbWithUnk: Float64Array.from(log10ProbWithUnk) }
    : null;
  return { chunk: chunk.index, sums, reads, lines };
}
