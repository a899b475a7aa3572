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
import { BlockScorer } from './token-ids.ts';

/** How the chunks of one `quern score` run are read and what is kept of them. */
export interface ScoreSettings {
  normalize: NormalizeOptions;
  /** JSON Lines: the text field's path. */
  textField: string[] | undefined;
  skipBad: boolean;
  /** Keep each record's figures (ChunkScore.records), for per-line records. */
  perLine: boolean;
}

/**
 * Per record of a chunk, in order, what its per-line record reports: a record is a sentence of plain
 * text, or a JSON Lines document (the sums over the lines of its text field, which are its
 * sentences; a document without a sentence has no record).
 */
export interface RecordFigures {
  tokens: Int32Array;
  oov: Int32Array;
  log10Prob: Float64Array;
  log10ProbWithUnk: Float64Array;
  /** Each record's line, counted from 1 at the chunk's first line, and its sentences (1 for a
   *  sentence of plain text). */
  line: Int32Array;
  sentences: Int32Array;
  /** Whether the records are JSON Lines documents (else sentences of plain text). */
  documents: boolean;
}

/** A scored chunk (structured-clone safe, for a worker's reply). */
export interface ChunkScore {
  chunk: number;
  sums: PerplexitySums;
  /** What reading saw (a skipped line's number within the chunk: `lineInChunk`). */
  reads: ChunkReadStats;
  /** Null unless ScoreSettings.perLine. */
  records: RecordFigures | null;
}

/** Scores `chunk` of `file` with `model` (a normalised one: the caller checks). */
export async function scoreChunk(model: PackedModel, file: InputFile, chunk: Chunk, settings: ScoreSettings): Promise<ChunkScore> {
  const sums: PerplexitySums = { sentences: 0, tokens: 0, oov: 0, log10Prob: 0, log10ProbWithUnk: 0 };
  const documents = file.format === 'jsonl';
  const tokens: number[] = [];
  const oov: number[] = [];
  const log10Prob: number[] = [];
  const log10ProbWithUnk: number[] = [];
  const line: number[] = [];
  const sentences: number[] = [];
  // The line of each sentence given to the scorer (per-line records), and how many were scored.
  const sentenceLines: number[] = [];
  let scored = 0;
  // Sentences are scored in groups (BlockScorer: many at once for a large model), each sentence's
  // figures coming back in order.
  const scorer = new BlockScorer(model, (sentenceTokens, sentenceOov, sentenceLog10Prob, sentenceLog10ProbWithUnk) => {
    sums.sentences++;
    sums.tokens += sentenceTokens;
    sums.oov += sentenceOov;
    sums.log10Prob += sentenceLog10Prob;
    sums.log10ProbWithUnk += sentenceLog10ProbWithUnk;
    if (!settings.perLine) return;
    const at = tokens.length - 1;
    if (at >= 0 && line[at] === sentenceLines[scored]) {
      // Another sentence of the same document.
      tokens[at] += sentenceTokens;
      oov[at] += sentenceOov;
      log10Prob[at] += sentenceLog10Prob;
      log10ProbWithUnk[at] += sentenceLog10ProbWithUnk;
      sentences[at]++;
    } else {
      tokens.push(sentenceTokens);
      oov.push(sentenceOov);
      log10Prob.push(sentenceLog10Prob);
      log10ProbWithUnk.push(sentenceLog10ProbWithUnk);
      line.push(sentenceLines[scored]);
      sentences.push(1);
    }
    scored++;
  });
  // The tokens are looked up in the model's vocabulary, from their bytes where they can be
  // (TokenReader, as the count reads text; JSON Lines and some normalisations as strings), each
  // sentence with its line in the chunk.
  const reader = new TokenReader(settings.normalize, model, false);
  let linesBefore = 0;
  const reads = await reader.read(file, chunk, { format: file.format, textField: settings.textField, skipBad: settings.skipBad }, (block) => {
    if (settings.perLine) for (let s = 0; s < block.sentences; s++) sentenceLines.push(linesBefore + block.sentenceLines[s]);
    linesBefore += block.lines;
    scorer.add(block);
  });
  scorer.flush();
  const records = settings.perLine
    ? {
        tokens: Int32Array.from(tokens), oov: Int32Array.from(oov), log10Prob: Float64Array.from(log10Prob), log10ProbWithUnk: Float64Array.from(log10ProbWithUnk),
        line: Int32Array.from(line), sentences: Int32Array.from(sentences), documents,
      }
    : null;
  return { chunk: chunk.index, sums, reads, records };
}
