/**
 * Standard input as an input (the spec `-` of `quern score`): read once, as a stream, never whole.
 * Its first bytes are read here to tell gzip (1f 8b) from text, as discovery does for a file, and
 * put back in front of the stream, which is then cut into pieces as it is read (TextPieces).
 */
import { Readable } from 'node:stream';
import { ioError, QuernError } from '../errors.ts';
import { inputName, type InputFile, type InputFormat } from './types.ts';

/** The input spec, and the name in results and messages, of standard input. */
export const STDIN_SPEC = '-';

/** Standard input as an input, and its bytes from the start (the first ones put back). */
export interface StdinInput {
  input: InputFile;
  source: Readable;
}

/**
 * Takes `-` out of `specs`: whether it was there, and the other specs in their order.
 * @throws QuernError('config') when `-` is given more than once (standard input can be read once).
 */
export function splitStdinSpec(specs: readonly string[]): { stdin: boolean; files: string[] } {
  const files = specs.filter((spec) => spec !== STDIN_SPEC);
  if (specs.length - files.length > 1) {
    throw new QuernError('config', `inputs: ${STDIN_SPEC} (standard input) is given ${specs.length - files.length} times; it can be read only once`);
  }
  return { stdin: files.length < specs.length, files };
}

/**
 * Opens `stream` (standard input) as an input of `format`: waits for its first two bytes (or its
 * end) to know whether it is gzip, and returns the input with its bytes from the start (the stream,
 * those bytes put back). The caller reads the source to its end or destroys it.
 *
 * @throws an 'io' QuernError when the stream cannot be read.
 */
export async function openStdin(format: InputFormat, stream: Readable = process.stdin): Promise<StdinInput> {
  const input: InputFile = { path: STDIN_SPEC, bytes: 0, mtimeMs: 0, gzip: false, format, fingerprint: '', stdin: true };
  let head: { bytes: Buffer; ended: boolean };
  try {
    head = await readHead(stream, 2);
  } catch (cause) {
    stream.destroy();
    throw ioError('read', inputName(input), cause);
  }
  input.gzip = head.bytes.length >= 2 && head.bytes[0] === 0x1f && head.bytes[1] === 0x8b;
  // Ended already (fewer than two bytes): those bytes are all there is, as a stream of their own.
  if (head.ended) return { input, source: Readable.from(head.bytes.length > 0 ? [head.bytes] : [], { objectMode: false }) };
  stream.unshift(head.bytes);
  return { input, source: stream };
}

/**
 * Reads from the paused `stream` until at least `bytes` bytes have come or it has ended. Bytes
 * taken before the end can be put back with `unshift`; after it, they cannot.
 */
function readHead(stream: Readable, bytes: number): Promise<{ bytes: Buffer; ended: boolean }> {
  return new Promise((resolve, reject) => {
    const blocks: Buffer[] = [];
    let length = 0;
    const stop = (): void => {
      stream.off('readable', onReadable);
      stream.off('end', onEnd);
      stream.off('error', onError);
    };
    const onReadable = (): void => {
      // read() returns what is buffered, or null when that is all for now (or at the end: then 'end' follows).
      for (let block = stream.read() as Buffer | null; block !== null; block = stream.read() as Buffer | null) {
        blocks.push(block);
        length += block.length;
        if (length >= bytes) {
          stop();
          resolve({ bytes: Buffer.concat(blocks, length), ended: false });
          return;
        }
      }
    };
    const onEnd = (): void => {
      stop();
      resolve({ bytes: Buffer.concat(blocks, length), ended: true });
    };
    const onError = (cause: unknown): void => {
      stop();
      reject(cause);
    };
    stream.on('readable', onReadable);
    stream.on('end', onEnd);
    stream.on('error', onError);
  });
}
