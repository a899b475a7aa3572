/**
 * Reading the files the stages wrote (run files, result files, model files, inputs): opening with
 * the size, and reading exact byte ranges, with errors that name the file. A read that comes up
 * short (the file ended early: truncated, or changed while being read) is the caller's to name,
 * since what it means differs by format.
 */
import { promises as fsp } from 'node:fs';
import { ioError, type QuernError } from '../errors.ts';

/** Opens `filePath` for reading and stats it; 'io' QuernError naming the file on failure. */
export async function openForReading(filePath: string): Promise<{ handle: fsp.FileHandle; bytes: number }> {
  let handle: fsp.FileHandle;
  try {
    handle = await fsp.open(filePath, 'r');
  } catch (cause) {
    throw ioError('open', filePath, cause);
  }
  try {
    return { handle, bytes: (await handle.stat()).size };
  } catch (cause) {
    await handle.close().catch(() => undefined);
    throw ioError('stat', filePath, cause);
  }
}

/**
 * Fills `buffer` with the bytes of the file at `position`. A failing read is an 'io' QuernError;
 * a file that ends first gets `short(endedAt, missing)`: the byte where it ended and the bytes
 * still missing.
 */
export async function readFullyAt(
  handle: fsp.FileHandle,
  filePath: string,
  buffer: Uint8Array,
  position: number,
  short: (endedAt: number, missing: number) => QuernError,
): Promise<void> {
  let done = 0;
  while (done < buffer.length) {
    let bytesRead: number;
    try {
      ({ bytesRead } = await handle.read(buffer, done, buffer.length - done, position + done));
    } catch (cause) {
      throw ioError('read', filePath, cause);
    }
    if (bytesRead === 0) throw short(position + done, buffer.length - done);
    done += bytesRead;
  }
}
