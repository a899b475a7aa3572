/**
 * Typed operating errors and programmer-error assertions.
 *
 * Operating errors (bad input, full disk, corrupt file, bad option, a limit reached) are
 * `QuernError`s: they carry a code that the CLI maps to an exit status in one place
 * (src/cli/exit.ts) and, where they concern input, the file, line and byte offset.
 * Assertions (`assert`) catch programmer errors: they throw a plain `Error` and are never caught.
 */

export type QuernErrorCode = 'input' | 'io' | 'corrupt' | 'config' | 'limit' | 'interrupted';

/** Where in the input an error was found. Lines are 1-based, byte offsets 0-based. */
export interface InputLocation {
  file: string;
  line?: number;
  byteOffset?: number;
}

export interface QuernErrorOptions {
  cause?: unknown;
  location?: InputLocation;
}

export class QuernError extends Error {
  readonly code: QuernErrorCode;
  readonly location: InputLocation | undefined;

  constructor(code: QuernErrorCode, message: string, options: QuernErrorOptions = {}) {
    super(message, options.cause === undefined ? undefined : { cause: options.cause });
    this.name = 'QuernError';
    this.code = code;
    this.location = options.location;
  }
}

/** Formats a location as `file:line (byte N)` for messages. */
export function formatLocation(location: InputLocation): string {
  let text = location.file;
  if (location.line !== undefined) text += `:${location.line}`;
  if (location.byteOffset !== undefined) text += ` (byte ${location.byteOffset})`;
  return text;
}

/** Throws a plain Error when `condition` is false: a programmer error, never caught. */
export function assert(condition: unknown, message: string): asserts condition {
  if (!condition) throw new Error(`assertion failed: ${message}`);
}

/** Wraps a Node system error (ENOENT, EACCES, ENOSPC, …) as an 'io' QuernError naming the path. */
export function ioError(action: string, path: string, cause: unknown): QuernError {
  const code = (cause as NodeJS.ErrnoException | undefined)?.code;
  const reason = code === 'ENOSPC' ? 'no space left on device' : (cause as Error | undefined)?.message ?? String(cause);
  return new QuernError('io', `cannot ${action} ${path}: ${reason}`, { cause });
}
