/**
 * Token files: the vocabulary pass's tokens of a chunk, kept on disk for the count pass, so that
 * it reads word-table entries instead of reading and tokenizing the text a second time (scanning
 * and looking up every token was about a quarter of the count pass on plain text in a CPU profile
 * of the 200 MB benchmark corpus at order 3; gunzip and JSON parsing come on top for those inputs).
 *
 * An accelerator, never a source of truth: the count pass uses a token file only when its size and
 * CRC-32 equal those job.json recorded when the vocabulary pass finished, and reads the chunk's
 * text otherwise. So the files are written without fsync, and deleted once the count pass is done.
 *
 * Layout (docs/run-file.md, "Token files"), host byte order (asserted little-endian):
 *   header   8 bytes magic "QRNTOK01", u32 chunk, u32 table (the word table the entries index)
 *   blocks   per block of the pass: u32 tokens T, u32 sentences S, T × i32 entries, S × u32 sentence ends
 * A word table is a vocabulary worker's; its entries map to vocabulary ids through the table's map
 * file, `tokens/t{table}.map` (u32 per entry), written when the vocabulary is built.
 */
import { endianness } from 'node:os';
import * as path from 'node:path';
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import type { TokenBlock } from '../corpus/byte-tokenizer.ts';
import { openForReading, readFullyAt } from '../job/file-read.ts';
import type { StageFs, WritableFile } from '../job/fsio.ts';

export const TOKENS_DIR = 'tokens';
const MAGIC = Buffer.from('QRNTOK01', 'latin1');
const HEADER_BYTES = 16;
const BLOCK_HEADER_BYTES = 8;

assert(endianness() === 'LE', 'token files are written in host byte order, which must be little-endian');

/** What job.json records of a chunk's token file. */
export interface TokenFileRecord {
  /** The word table whose entries the file holds (a vocabulary worker's). */
  table: number;
  bytes: number;
  crc32: number;
}

/** The token file of `chunk`, relative to the job directory. */
export function tokenFilePath(chunk: number): string {
  return path.join(TOKENS_DIR, `c${chunk}.tok`);
}

/** The entry → id map of word table `table`, relative to the job directory. */
export function tokenMapPath(table: number): string {
  return path.join(TOKENS_DIR, `t${table}.map`);
}

/** Writes one chunk's token file as the blocks of the vocabulary pass arrive. */
export class TokenFileWriter {
  private bytes = 0;
  private crc = 0;

  private constructor(private readonly fs: StageFs, private readonly file: WritableFile, private readonly tmpPath: string, private readonly finalPath: string, private readonly table: number) {}

  static async open(fs: StageFs, jobDir: string, chunk: number, table: number): Promise<TokenFileWriter> {
    const finalPath = path.join(jobDir, tokenFilePath(chunk));
    const tmpPath = `${finalPath}.${process.pid}.tmp`;
    const writer = new TokenFileWriter(fs, await fs.create(tmpPath), tmpPath, finalPath, table);
    const header = Buffer.alloc(HEADER_BYTES);
    MAGIC.copy(header, 0);
    header.writeUInt32LE(chunk, 8);
    header.writeUInt32LE(table, 12);
    await writer.put(header);
    return writer;
  }

  private async put(bytes: Uint8Array): Promise<void> {
    this.crc = crc32(bytes, this.crc);
    this.bytes += bytes.byteLength;
    await this.file.write(bytes);
  }

  /** Appends a block's tokens and sentence ends (copied: the block is reused after this resolves). */
  async append(block: TokenBlock): Promise<void> {
    const head = Buffer.alloc(BLOCK_HEADER_BYTES);
    head.writeUInt32LE(block.tokens, 0);
    head.writeUInt32LE(block.sentences, 4);
    await this.put(head);
    await this.put(new Uint8Array(block.entries.buffer, block.entries.byteOffset, 4 * block.tokens));
    await this.put(new Uint8Array(block.sentenceEnds.buffer, block.sentenceEnds.byteOffset, 4 * block.sentences));
  }

  /** Closes the file under its final name (no fsync: the record's CRC guards its use). */
  async finish(): Promise<TokenFileRecord> {
    await this.file.close();
    await this.fs.rename(this.tmpPath, this.finalPath);
    return { table: this.table, bytes: this.bytes, crc32: this.crc >>> 0 };
  }

  /** Drops the unfinished file. */
  async abort(): Promise<void> {
    await this.file.close().catch(() => undefined);
    await this.fs.unlink(this.tmpPath).catch(() => undefined);
  }
}

function shortFile(file: string): (endedAt: number, missing: number) => QuernError {
  return (endedAt, missing) => new QuernError('corrupt', `${file}: token file ends at byte ${endedAt}, ${missing} bytes early`);
}

/** Read buffer for checking a file's CRC. */
const CHECK_BUFFER_BYTES = 1 << 20;

/**
 * Whether `chunk`'s token file is there and exactly what `record` says (size, CRC-32, header). A
 * missing, short or changed file is no error: the count pass reads the chunk's text instead.
 */
export async function tokenFileIntact(jobDir: string, chunk: number, record: TokenFileRecord): Promise<boolean> {
  const file = path.join(jobDir, tokenFilePath(chunk));
  let opened: Awaited<ReturnType<typeof openForReading>>;
  try {
    opened = await openForReading(file);
  } catch {
    return false;
  }
  const { handle, bytes } = opened;
  try {
    if (bytes !== record.bytes || bytes < HEADER_BYTES) return false;
    const buffer = Buffer.allocUnsafe(Math.min(CHECK_BUFFER_BYTES, bytes));
    let crc = 0;
    for (let at = 0; at < bytes;) {
      const length = Math.min(buffer.length, bytes - at);
      await readFullyAt(handle, file, buffer.subarray(0, length), at, shortFile(file));
      if (at === 0 && (!buffer.subarray(0, 8).equals(MAGIC) || buffer.readUInt32LE(8) !== chunk || buffer.readUInt32LE(12) !== record.table)) return false;
      crc = crc32(buffer.subarray(0, length), crc);
      at += length;
    }
    return crc >>> 0 === record.crc32;
  } catch {
    return false;
  } finally {
    await handle.close();
  }
}

/** One block as read back: entries[0 .. tokens), sentenceEnds[0 .. sentences). Reused between calls. */
export interface TokenFileBlock {
  entries: Int32Array;
  tokens: number;
  sentenceEnds: Uint32Array;
  sentences: number;
}

/**
 * Reads `chunk`'s token file block by block (check it with `tokenFileIntact` first). `onBlock` may
 * return a promise; reading waits for it. `onBytesRead` gets the file bytes read so far.
 */
export async function readTokenFile(
  jobDir: string, chunk: number,
  onBlock: (block: TokenFileBlock) => void | Promise<void>,
  onBytesRead?: (bytesRead: number, bytes: number) => void,
): Promise<void> {
  const file = path.join(jobDir, tokenFilePath(chunk));
  const { handle, bytes } = await openForReading(file);
  try {
    const head = Buffer.alloc(BLOCK_HEADER_BYTES);
    let payload = new ArrayBuffer(1 << 20);
    let at = HEADER_BYTES;
    while (at < bytes) {
      await readFullyAt(handle, file, head, at, shortFile(file));
      const tokens = head.readUInt32LE(0);
      const sentences = head.readUInt32LE(4);
      const length = 4 * (tokens + sentences);
      if (at + BLOCK_HEADER_BYTES + length > bytes) throw new QuernError('corrupt', `${file}: a block at byte ${at} runs past the end of the file`);
      if (payload.byteLength < length) payload = new ArrayBuffer(Math.max(length, 2 * payload.byteLength));
      const view = Buffer.from(payload, 0, length);
      await readFullyAt(handle, file, view, at + BLOCK_HEADER_BYTES, shortFile(file));
      await onBlock({ entries: new Int32Array(payload, 0, tokens), tokens, sentenceEnds: new Uint32Array(payload, 4 * tokens, sentences), sentences });
      at += BLOCK_HEADER_BYTES + length;
      onBytesRead?.(at, bytes);
    }
  } finally {
    await handle.close();
  }
}
