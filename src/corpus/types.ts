/** Domain types of the corpus stage: inputs, chunks, normalisation and read statistics. */

export type InputFormat = 'text' | 'jsonl';

/** One input shard as recorded in the job manifest (or standard input, for `quern score`). */
export interface InputFile {
  /** Absolute path; `-` for standard input. */
  path: string;
  /** Size on disk in bytes (compressed size for gzip); 0 for standard input, whose size is not known. */
  bytes: number;
  mtimeMs: number;
  /** True when the file starts with the gzip magic bytes 1f 8b (whatever its name). */
  gzip: boolean;
  format: InputFormat;
  /** sha256 (hex) of the size, the first and the last FINGERPRINT_EDGE_BYTES of the file ('' for standard input). */
  fingerprint: string;
  /**
   * Only for `quern score`, never in a manifest: the input is standard input (src/corpus/stdin.ts),
   * read once from its start by the main thread and cut into pieces (ChunkPiece) as it is read.
   */
  stdin?: boolean;
}

/** How messages name an input: its path, or "standard input". */
export function inputName(file: InputFile): string {
  return file.stdin === true ? 'standard input' : file.path;
}

/** Said after a location in `-` (standard input), what `-` is; nothing for a file. */
export function ofStdin(file: InputFile): string {
  return file.stdin === true ? ' of standard input' : '';
}

/**
 * A unit of reading work: a line-aligned byte range of one input. A plain file may be split into
 * several chunks; a gzip file is one chunk covering the whole file, or (planned so, for the count)
 * line-aligned ranges of its decompressed text.
 * `byteStart` is 0 or the offset just after a '\n'; `byteEnd` is exclusive and is the file size or
 * the offset just after a '\n'.
 */
export interface Chunk {
  index: number;
  fileIndex: number;
  byteStart: number;
  byteEnd: number;
  /**
   * Only for a range of a gzip input's decompressed text (a large gzip input planned in pieces,
   * src/corpus/text-pieces.ts): `byteStart` and `byteEnd` are offsets in that text, and this is
   * the number of its lines before `byteStart`. Absent: a byte range of the file itself.
   */
  linesBefore?: number;
}

/** Whether `chunk` is a range of a gzip input's decompressed text (with or without its bytes). */
export function isTextRange(chunk: Chunk): boolean {
  return chunk.linesBefore !== undefined;
}

/**
 * A chunk whose bytes the caller has read already: a line-aligned range of a gzip input's
 * decompressed stream, or of standard input (src/corpus/text-pieces.ts), so that one large gzip
 * file, or standard input, can be read by many threads. `byteStart` and `byteEnd` are offsets in
 * the (decompressed) stream; `data` holds exactly those bytes. Its last line may be cut short only
 * when it is longer than LINE_BYTES_MAX (the reader then rejects or skips it as overlong, and the
 * next piece starts after it).
 */
export interface ChunkPiece extends Chunk {
  data: Uint8Array;
  /** Lines of the decompressed stream before `byteStart`: this piece's lines are numbered from there. */
  linesBefore: number;
  /** The input bytes (compressed ones for gzip) this piece stands for, for progress (the pieces of
   *  a file sum to its size). */
  sourceBytes: number;
}

/** Whether `chunk` carries its bytes (a ChunkPiece). */
export function isChunkPiece(chunk: Chunk): chunk is ChunkPiece {
  return (chunk as Partial<ChunkPiece>).data !== undefined;
}

/** The input bytes a chunk stands for, as progress counts them (compressed bytes for a gzip piece). */
export function inputBytesOf(chunk: Chunk): number {
  return isChunkPiece(chunk) ? chunk.sourceBytes : chunk.byteEnd - chunk.byteStart;
}

export type UnicodeForm = 'none' | 'nfc' | 'nfkc';
export type SplitMode = 'space' | 'chars';

/** How a sentence becomes tokens (README: "Normalisation"). */
export interface NormalizeOptions {
  /** Lower-case with String.prototype.toLowerCase (locale-independent). */
  lowercase: boolean;
  /** Unicode normalisation applied before splitting. */
  unicode: UnicodeForm;
  /** 'space': tokens are separated by white space; 'chars': every non-space character is a token. */
  split: SplitMode;
}

/** Whether `value` is a NormalizeOptions, as a file read back (a model file, an ARPA file) must hold it. */
export function isNormalizeOptions(value: unknown): value is NormalizeOptions {
  if (typeof value !== 'object' || value === null) return false;
  const v = value as Record<string, unknown>;
  return typeof v.lowercase === 'boolean' && (v.unicode === 'none' || v.unicode === 'nfc' || v.unicode === 'nfkc') && (v.split === 'space' || v.split === 'chars');
}

export interface ReadOptions {
  format: InputFormat;
  /** For JSONL: the path of the text field, e.g. ['body', 'text'] for `--text-field body.text`. */
  textField: string[] | undefined;
  /** Skip bad lines/records (counted and reported) instead of stopping. */
  skipBad: boolean;
}

/** One skipped line or record, kept as an example for the report (a bounded number per file). */
export interface SkippedSample {
  line: number | undefined;
  byteOffset: number;
  reason: string;
}

/** What reading one chunk saw. Sums over chunks account for every input line. */
export interface ReadStats {
  /** Input bytes consumed (compressed bytes for gzip). */
  bytesRead: number;
  /** Physical lines of the file range (JSONL: records). */
  lines: number;
  /** Sentences handed on (non-empty after normalisation). */
  sentences: number;
  /** Lines (or lines inside JSONL text fields) that were empty or held only white space. */
  emptyLines: number;
  /** Lines or records skipped as bad (only with skipBad). */
  skipped: number;
  skippedSamples: SkippedSample[];
}
