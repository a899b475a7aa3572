/**
 * Quern as a library: count a corpus into a job directory, read its counts, report on them.
 * The CLI (`src/cli/`) is a thin layer over these functions.
 */
export { runCount, type CountRequest, type CountSummary } from './job/pipeline.ts';
export type { JobConfig, JobManifest } from './job/manifest.ts';
export type { ProgressSink } from './job/context.ts';
export { listNgrams, type ListedNgram, type ListOptions } from './count/listing.ts';
export { PartitionStore, partitionStoreDir } from './merge/store.ts';
export { storeDigest } from './merge/digest.ts';
export { readStatsFile, type StatsFile } from './merge/stage.ts';
export { loadStatsInput } from './stats/job-stats.ts';
export { buildReport, type Report } from './stats/report.ts';
export { renderText } from './stats/render-text.ts';
export { renderHtml } from './stats/render-html.ts';
export { verifyJob, verifyFailure, type VerifyReport } from './job/verify.ts';
export { QuernError, type QuernErrorCode } from './errors.ts';
export type { NormalizeOptions, InputFile, Chunk } from './corpus/types.ts';
export { estimate, type EstimateRequest } from './estimate/estimate.ts';
export { loadCountTables } from './estimate/from-store.ts';
export { estimateJobStreaming, type StreamEstimateRequest, type StreamEstimateSummary } from './estimate/stream-stage.ts';
export { fitWeightsOnJob } from './estimate/heldout-store.ts';
export { openJobModelSource } from './estimate/job-model-source.ts';
export { materialiseModel } from './estimate/model-source.ts';
export { modelSource, type ModelSource, type ModelRowBatch } from './estimate/model-source.ts';
export { countCorpus, type CountTables } from './estimate/counts.ts';
export { logProb, type LanguageModel } from './estimate/model.ts';
export { perplexity } from './score/perplexity.ts';
export { BatchScorer, scoreSentences } from './score/batch.ts';
export { packModel, packModelSource, type PackOptions, type PackSummary } from './pack/writer.ts';
export { DecoderState, ModelState, modelFromShared, openModel, type PackedModel, type SharedModel } from './pack/reader.ts';
export { contextState, nextTokens, type NextOptions, type NextToken } from './score/next-words.ts';
export { openArpaSource, readArpa, writeArpa, type ArpaSource } from './pack/arpa.ts';
