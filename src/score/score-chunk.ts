/**
 * One chunk of an input (a line-aligned byte range, src/corpus/plan.ts) read, tokenised and scored:
 * the unit of `quern score`'s work, done in the main thread or in a worker (src/count/worker.ts,
 * phase 'score') alike. Its sums are added sentence by sentence in order, and the command adds the
 * chunks' sums in chunk order, so the totals do not depend on how many threads scored them.
 */
import type { ChunkReadStats } from '../corpus/read.ts';
import { TokenReader } from '../corpus/read-tokens.ts';
import type { Chunk, InputFile, NormalizeOptions } from '../corpus/types.ts';
import type { PackedModel } from '../pack/reader.ts';
import type { PerplexitySums } from './perplexity.ts';
import { BlockScorer, modelWords } from './token-ids.ts';

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
  // The text's tokens are looked up in the model's words from their bytes (TokenReader, as the
  // count reads text), and scored in groups (BlockScorer: many sentences at once for a large model).
  const scorer = new BlockScorer(model, modelWords(model), (sentenceTokens, sentenceOov, sentenceLog10Prob, sentenceLog10ProbWithUnk) => {
    sums.sentences++;
    sums.tokens += sentenceTokens;
    sums.oov += sentenceOov;
    sums.log10Prob += sentenceLog10Prob;
    sums.log10ProbWithUnk += sentenceLog10ProbWithUnk;
    if (!settings.perLine) return;
    tokens.push(sentenceTokens);
    oov.push(sentenceOov);
    log10Prob.push(sentenceLog10Prob);
    log10ProbWithUnk.push(sentenceLog10ProbWithUnk);
  });
  const reader = new TokenReader(settings.normalize, modelWords(model).table, false);
  const reads = await reader.read(file, chunk, { format: file.format, textField: settings.textField, skipBad: settings.skipBad }, (block) => scorer.add(block));
  scorer.flush();
  const lines = settings.perLine
    ? { tokens: Int32Array.from(tokens), oov: Int32Array.from(oov), log10Prob: Float64Array.from(log10Prob), log10ProbWithUnk: Float64Array.from(log10ProbWithUnk) }
    : null;
  return { chunk: chunk.index, sums, reads, lines };
}
