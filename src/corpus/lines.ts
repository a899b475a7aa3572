/**
 * Small line-level helpers of the readers.
 */
import { promises as fsp } from 'node:fs';
import { ioError } from '../errors.ts';
import { READ_BLOCK_BYTES } from '../limits.ts';

const NON_SPACE = /\S/;

/**
 * True when `line` is empty or holds only white space (the JS `\s` set, the same set the
 * tokenizer splits on). A line starting with a printable ASCII character is decided at once.
 */
export function isBlankLine(line: string): boolean {
  if (line.length === 0) return true;
  const first = line.charCodeAt(0);
  if (first > 0x20 && first < 0x7f) return false;
  return !NON_SPACE.test(line);
}

/**
 * Calls `onLine` for each line of `text` (split on '\n', a trailing '\r' removed). A final '\n'
 * does not start another line; an empty `text` is one empty line.
 */
export function forEachLine(text: string, onLine: (line: string) => void): void {
  let position = 0;
  for (;;) {
    const newline = text.indexOf('\n', position);
    let end = newline < 0 ? text.length : newline;
    if (end > position && text.charCodeAt(end - 1) === 0x0d) end--;
    onLine(text.slice(position, end));
    if (newline < 0 || newline + 1 === text.length) return;
    position = newline + 1;
  }
}

/**
 * Counts '\n' bytes in [0, byteEnd) of a file. Used on error paths only, to turn a line index
 * inside a chunk into an absolute line number.
 */
export async function countNewlines(filePath: string, byteEnd: number): Promise<number> {
  let handle: fsp.FileHandle | undefined;
  try {
    handle = await fsp.open(filePath, 'r');
    const block = Buffer.allocUnsafe(Math.min(READ_BLOCK_BYTES, Math.max(byteEnd, 1)));
    let newlines = 0;
    let offset = 0;
    while (offset < byteEnd) {
      const { bytesRead } = await handle.read(block, 0, Math.min(block.length, byteEnd - offset), offset);
      if (bytesRead === 0) break;
      const view = block.subarray(0, bytesRead);
      for (let position = view.indexOf(0x0a); position >= 0; position = view.indexOf(0x0a, position + 1)) newlines++;
      offset += bytesRead;
    }
    return newlines;
  } catch (cause) {
    throw ioError('read', filePath, cause);
  } finally {
    await handle?.close();
  }
}
