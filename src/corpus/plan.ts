/**
 * Chunk planning: splits inputs into line-aligned byte ranges, the units of reading work.
 */
import { promises as fsp } from 'node:fs';
import { assert, ioError, QuernError } from '../errors.ts';
import { PLAN_SCAN_BLOCK_BYTES } from '../limits.ts';
import { TextPieces } from './text-pieces.ts';
import type { Chunk, InputFile } from './types.ts';

/** How `planChunks` treats gzip inputs. */
export interface PlanOptions {
  /** Plan a large gzip input as ranges of its decompressed text (Chunk.linesBefore), found by
   *  decompressing it once now, so that this many workers can share it (`splitsGzip`). */
  splitGzipFor?: { workers: number };
}

/** A gzip file this much smaller than a chunk (compressed) is likely one chunk of text or less:
 *  it stays one chunk, and is not decompressed to be planned. Text compresses 2.5 times (the
 *  benchmark's synthetic text, measured: 100 MB → 40.7 MB with gzip -6) to 3–4 times (natural
 *  text; from memory). */
const GZIP_SPLIT_RATIO = 4;

/** How many times its compressed size a gzip input's text is taken to be, when weighing it against
 *  the other inputs: between the 2.5 measured on the benchmark's text and natural text's 3–4 (from
 *  memory). */
const GZIP_TEXT_RATIO = 3;

/** A gzip input is split when, as one chunk, it would hold at least 1/(this × workers) of all the
 *  text: beside many files of its size, the workers are kept busy without it, and splitting costs a
 *  decompression at planning and the main thread's cutting in the vocabulary pass (bench:count
 *  --gzip-shards 8, the 200 MB corpus in 8 files: 1.3 s of planning with 8 workers; the wall-time
 *  ratios at 2 workers, 0.93–1.08×, were within the runs' spread: BENCHMARKS.md). */
const GZIP_SPLIT_SHARE = 2;

/**
 * Whether `planChunks` with `splitGzipFor` cuts `files[index]` (a gzip input) into ranges: when it
 * is at least 1/GZIP_SPLIT_RATIO of a chunk compressed, and its text (GZIP_TEXT_RATIO × its size)
 * is at least 1/(GZIP_SPLIT_SHARE × workers) of all the files' text together. So one large gzip
 * file is read by every worker, and a corpus of many gzip shards, already shared out file by file,
 * is not decompressed an extra time.
 */
export function splitsGzip(files: readonly InputFile[], index: number, chunkBytesTarget: number, workers: number): boolean {
  return splitsGzipOf(files[index], textBytesOf(files), chunkBytesTarget, workers);
}

/** The text of `files` together, as `splitsGzip` weighs it (a gzip file's: GZIP_TEXT_RATIO × its size). */
function textBytesOf(files: readonly InputFile[]): number {
  return files.reduce((sum, f) => sum + textBytes(f), 0);
}

function textBytes(file: InputFile): number {
  return file.gzip ? GZIP_TEXT_RATIO * file.bytes : file.bytes;
}

/** `splitsGzip` of `file` among inputs of `totalText` text bytes (textBytesOf). */
function splitsGzipOf(file: InputFile, totalText: number, chunkBytesTarget: number, workers: number): boolean {
  assert(Number.isSafeInteger(workers) && workers >= 1, `workers ${workers} is a positive integer`);
  if (!file.gzip || file.bytes < chunkBytesTarget / GZIP_SPLIT_RATIO) return false;
  return textBytes(file) * GZIP_SPLIT_SHARE * workers >= totalText;
}

/**
 * Splits `files` into chunks, in file order then byte order, with `index` counting from 0.
 *
 * A gzip input is one chunk covering the whole (compressed) file: a deflate stream cannot be
 * entered in the middle. With `splitGzipFor`, a large one (`splitsGzip`) is cut instead where its
 * decompressed text would be cut as a plain file (the ranges carry `linesBefore`); a bad gzip stream
 * then fails here.
 * A plain input (text or JSONL) is cut about every `chunkBytesTarget`
 * bytes: from each target offset the planner reads forward to just after the next '\n', so every
 * chunk holds whole lines, none is empty, and together they cover the file exactly. An empty file
 * is one chunk 0..0, so every input appears in the plan; so is standard input (`quern score`), whose
 * size is not known: it is cut into pieces as it is read (TextPieces). The result depends only on
 * the file contents, `chunkBytesTarget` and `splitGzipFor`.
 *
 * @param chunkBytesTarget a positive integer (typically CHUNK_BYTES_TARGET).
 * @throws QuernError('config') for a bad `chunkBytesTarget`; QuernError('input') when a file's size
 *   no longer matches the discovered one; an 'io' QuernError when a file cannot be read.
 */
export async function planChunks(files: InputFile[], chunkBytesTarget: number, options: PlanOptions = {}): Promise<Chunk[]> {
  if (!Number.isSafeInteger(chunkBytesTarget) || chunkBytesTarget < 1) {
    throw new QuernError('config', `chunkBytesTarget: must be a positive integer, got ${chunkBytesTarget}`);
  }
  const chunks: Chunk[] = [];
  // Once, not per file: a corpus may have 100,000 shards.
  const totalText = options.splitGzipFor === undefined ? 0 : textBytesOf(files);
  for (let fileIndex = 0; fileIndex < files.length; fileIndex++) {
    const file = files[fileIndex];
    if (file.stdin === true) {
      chunks.push({ index: chunks.length, fileIndex, byteStart: 0, byteEnd: 0 });
      continue;
    }
    if (options.splitGzipFor !== undefined && splitsGzipOf(file, totalText, chunkBytesTarget, options.splitGzipFor.workers)) {
      // Decompressed once here to find where its text's chunks end (TextPieces' cut, the bytes not
      // kept): the count's vocabulary pass cuts it again and hands the pieces to its workers.
      const ranges: Chunk[] = [];
      const cutter = TextPieces.ofFile(file, fileIndex, chunkBytesTarget, chunks.length);
      try {
        for (let range = await cutter.nextRange(); range !== undefined; range = await cutter.nextRange()) ranges.push(range);
      } finally {
        await cutter.close();
      }
      // Text of one chunk or less: the whole file, which a worker decompresses itself (as a range,
      // the vocabulary pass's main thread would decompress it again to hand it over).
      if (ranges.length > 1) {
        chunks.push(...ranges);
        continue;
      }
    }
    if (file.gzip || file.bytes === 0) {
      chunks.push({ index: chunks.length, fileIndex, byteStart: 0, byteEnd: file.bytes });
      continue;
    }
    for (const [byteStart, byteEnd] of await lineAlignedRanges(file, chunkBytesTarget)) {
      chunks.push({ index: chunks.length, fileIndex, byteStart, byteEnd });
    }
  }
  return chunks;
}

/** [start, end) ranges of a non-empty plain file, each ending just after a '\n' or at the end. */
async function lineAlignedRanges(file: InputFile, chunkBytesTarget: number): Promise<Array<[number, number]>> {
  let handle: fsp.FileHandle | undefined;
  try {
    handle = await fsp.open(file.path, 'r');
    const { size } = await handle.stat();
    if (size !== file.bytes) {
      throw new QuernError('input', `${file.path} changed since it was discovered (${file.bytes} bytes then, ${size} now)`);
    }
    const ranges: Array<[number, number]> = [];
    const scan = Buffer.alloc(PLAN_SCAN_BLOCK_BYTES);
    let start = 0;
    while (start < size) {
      const target = start + chunkBytesTarget;
      const end = target >= size ? size : await endOfLineAt(handle, scan, target - 1, size);
      ranges.push([start, end]);
      start = end;
    }
    return ranges;
  } catch (cause) {
    throw cause instanceof QuernError ? cause : ioError('read', file.path, cause);
  } finally {
    await handle?.close();
  }
}

/** The offset just after the first '\n' at or after `position`, or `size` when there is none. */
async function endOfLineAt(handle: fsp.FileHandle, scan: Buffer, position: number, size: number): Promise<number> {
  let offset = position;
  while (offset < size) {
    const { bytesRead } = await handle.read(scan, 0, Math.min(scan.length, size - offset), offset);
    if (bytesRead === 0) return size;
    const newline = scan.subarray(0, bytesRead).indexOf(0x0a);
    if (newline >= 0) return offset + newline + 1;
    offset += bytesRead;
  }
  return size;
}
