/**
 * A spool: a temporary file that the pack writes a section's content to in one pass over the
 * model, and reads back in order when the section's turn comes in the model file (writer.ts).
 *
 * Why: the sections of one order follow each other in the file (word ids, probabilities, back-off
 * weights, children), but one pass over the order's rows yields all of them at once, and every
 * pass over a streamed model (a k-way merge of the estimate's result files) costs as much as the
 * next. Spooled, each order is read twice (itself, and beside the order below for its children)
 * instead of seven times.
 *
 * Written through the stage's file system (so that its faults are those of any write), never
 * fsynced (it is deleted when its section is written; a crash leaves it as a `.tmp` file beside the
 * model, like the model's own temporary file), read back with node:fs in pieces of
 * PACK_SPOOL_BYTES.
 */
import * as fsp from 'node:fs/promises';
import { assert, ioError } from '../errors.ts';
import type { StageFs, WritableFile } from '../job/fsio.ts';
import { PACK_SPOOL_BYTES } from '../limits.ts';
import { trackTemporary, untrackTemporary } from './temporaries.ts';

export class Spool {
  /** Bytes written. */
  bytes = 0;
  /** The bytes gathered for the next write (released when the spool is closed). */
  private gathered: Buffer = Buffer.allocUnsafeSlow(PACK_SPOOL_BYTES);
  private gatheredBytes = 0;
  private file: WritableFile | null;

  private constructor(readonly filePath: string, file: WritableFile) {
    this.file = file;
  }

  static async create(fs: StageFs, filePath: string): Promise<Spool> {
    trackTemporary(filePath);
    try {
      return new Spool(filePath, await fs.create(filePath));
    } catch (error) {
      untrackTemporary(filePath);
      throw error;
    }
  }

  /** Appends bytes (gathered into writes of PACK_SPOOL_BYTES). */
  async write(bytes: Uint8Array): Promise<void> {
    assert(this.file !== null, 'a spool is written before it is read');
    let from = 0;
    while (from < bytes.length) {
      const length = Math.min(this.gathered.length - this.gatheredBytes, bytes.length - from);
      this.gathered.set(bytes.subarray(from, from + length), this.gatheredBytes);
      this.gatheredBytes += length;
      from += length;
      if (this.gatheredBytes === this.gathered.length) await this.flush();
    }
    this.bytes += bytes.length;
  }

  /** Ends the writing: the rest goes out and the file is closed. */
  async close(): Promise<void> {
    const file = this.file;
    if (file === null) return;
    await this.flush();
    this.file = null;
    this.gathered = Buffer.alloc(0);
    await file.close();
  }

  /**
   * The bytes written, in order, in pieces of at most `pieceBytes` (default PACK_SPOOL_BYTES) whose
   * lengths are multiples of `unit` (a piece is a view of a buffer that the next piece overwrites:
   * use it before asking for the next). A piece starts 8-byte aligned in its ArrayBuffer.
   */
  async *read(unit: number, pieceBytes: number = PACK_SPOOL_BYTES): AsyncGenerator<Uint8Array> {
    assert(this.file === null, 'a spool is read once it is closed');
    assert(Number.isInteger(unit) && unit >= 1 && unit <= pieceBytes && this.bytes % unit === 0, 'a spool holds whole values');
    const buffer = Buffer.allocUnsafeSlow(Math.floor(pieceBytes / unit) * unit);
    let handle: fsp.FileHandle;
    try {
      handle = await fsp.open(this.filePath, 'r');
    } catch (cause) {
      throw ioError('open', this.filePath, cause);
    }
    try {
      let position = 0;
      while (position < this.bytes) {
        const want = Math.min(buffer.length, this.bytes - position);
        let filled = 0;
        while (filled < want) {
          let bytesRead: number;
          try {
            ({ bytesRead } = await handle.read(buffer, filled, want - filled, position + filled));
          } catch (cause) {
            throw ioError('read', this.filePath, cause);
          }
          if (bytesRead === 0) throw ioError('read', this.filePath, new Error(`the file ends at byte ${position + filled} of the ${this.bytes} written`));
          filled += bytesRead;
        }
        position += filled;
        yield buffer.subarray(0, filled);
      }
    } finally {
      await handle.close().catch(() => undefined);
    }
  }

  /** Deletes the file (best effort: a spool left behind is a `.tmp` file nothing reads). */
  async remove(): Promise<void> {
    const file = this.file;
    this.file = null;
    await file?.close().catch(() => undefined);
    await fsp.rm(this.filePath, { force: true }).catch(() => undefined);
    untrackTemporary(this.filePath);
  }

  private async flush(): Promise<void> {
    if (this.gatheredBytes === 0) return;
    await (this.file as WritableFile).write(this.gathered.subarray(0, this.gatheredBytes));
    this.gatheredBytes = 0;
  }
}
