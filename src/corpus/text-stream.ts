/**
 * The text of one input read from its start as a stream of blocks: a file, or standard input;
 * gunzipped when the input is gzip. Counts the input bytes read (compressed ones for gzip) and
 * turns a failure of the stream into the error a whole read of the input gives.
 */
import { createReadStream } from 'node:fs';
import type { Readable, Transform } from 'node:stream';
import { createGunzip } from 'node:zlib';
import { formatLocation, ioError, QuernError, type InputLocation } from '../errors.ts';
import { READ_BLOCK_BYTES } from '../limits.ts';
import { inputName, ofStdin, type InputFile } from './types.ts';

export class TextStream {
  /** Blocks of the text (decompressed for gzip), in order. */
  readonly blocks: AsyncIterator<Buffer>;
  private bytes = 0;
  private sourceError: unknown;
  /** The gunzip stream between the source and `blocks`, for gzip. */
  private readonly gunzip: Transform | undefined;

  /**
   * @param file the input (its `gzip` says whether to gunzip `source`)
   * @param source the input's bytes from its start; `close` destroys it
   * @param bytesExpected the input's size (a file's, as discovered), checked at the end; undefined
   *   when it is not known (standard input)
   */
  constructor(readonly file: InputFile, private readonly source: Readable, readonly bytesExpected: number | undefined) {
    if (file.gzip) {
      const gunzip = createGunzip({ chunkSize: READ_BLOCK_BYTES });
      this.gunzip = gunzip;
      source.on('data', (block: Buffer) => {
        this.bytes += block.length;
      });
      source.on('error', (cause) => {
        this.sourceError = cause;
        gunzip.destroy(cause);
      });
      source.pipe(gunzip);
      this.blocks = gunzip[Symbol.asyncIterator]();
    } else {
      const raw = source[Symbol.asyncIterator]() as AsyncIterator<Buffer>;
      this.blocks = {
        next: async () => {
          const step = await raw.next();
          if (step.done !== true) this.bytes += step.value.length;
          return step;
        },
        return: async () => (await raw.return?.()) ?? { done: true, value: undefined },
      };
    }
  }

  /** Input bytes read so far (compressed ones for gzip). */
  get bytesRead(): number {
    return this.bytes;
  }

  /**
   * The error for a failed `blocks.next()`: the input could not be read, or (gzip) its data is
   * truncated or corrupt, `at` the line where the text broke off (as LineReader.currentLine gives it).
   */
  failure(cause: unknown, at: { lineInChunk: number; byteOffset: number }): QuernError {
    if (this.sourceError !== undefined || !this.file.gzip) return ioError('read', inputName(this.file), this.sourceError ?? cause);
    return gzipError(this.file, at, cause);
  }

  /** At the end of the text: throws when the input's size is not the one expected (a file that changed). */
  checkEnd(): void {
    if (this.bytesExpected !== undefined && this.bytes !== this.bytesExpected) {
      throw new QuernError('input', `${this.file.path} changed since it was discovered: ${this.bytes} bytes read, ${this.bytesExpected} expected`);
    }
  }

  /** Stops reading. The streams go first: a read of `blocks` still waiting for data (from a pipe)
   *  then ends too, and does not hold up the iterator's end. */
  async close(): Promise<void> {
    this.source.destroy();
    this.gunzip?.destroy();
    await this.blocks.return?.().catch(() => undefined);
  }
}

/** The text of the file `file` from its start (gunzipped if it is gzip), of the size discovered. */
export function fileText(file: InputFile): TextStream {
  return new TextStream(file, createReadStream(file.path, { highWaterMark: READ_BLOCK_BYTES }), file.bytes);
}

/** The error for gzip data that breaks off or is corrupt, `at` the line where the text stopped. */
export function gzipError(file: InputFile, at: { lineInChunk: number; byteOffset: number }, cause: unknown): QuernError {
  const location: InputLocation = { file: file.path, line: at.lineInChunk, byteOffset: at.byteOffset };
  const reason = (cause as Error | undefined)?.message ?? String(cause);
  return new QuernError(
    'input',
    `${formatLocation(location)}${ofStdin(file)}: truncated or corrupt gzip data (${reason}); the byte offset is in the decompressed stream`,
    { cause, location },
  );
}
