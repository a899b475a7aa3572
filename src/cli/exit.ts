/** The one place where errors become messages and exit statuses. */
import { formatLocation, QuernError, type QuernErrorCode } from '../errors.ts';

/** Exit status per error code (documented in the README). */
export const EXIT_STATUS: Record<QuernErrorCode | 'internal', number> = {
  config: 2,
  input: 3,
  io: 4,
  corrupt: 5,
  limit: 6,
  interrupted: 130,
  internal: 70,
};

/** Prints `error` to stderr and returns the exit status for it. */
export function reportError(error: unknown): number {
  if (error instanceof QuernError) {
    // Input errors carry their location at the start of the message already.
    const where = error.location && !error.message.startsWith(error.location.file) ? `${formatLocation(error.location)}: ` : '';
    process.stderr.write(`quern: ${where}${error.message}\n`);
    return EXIT_STATUS[error.code];
  }
  process.stderr.write(`quern: internal error (please report it): ${(error as Error)?.stack ?? String(error)}\n`);
  return EXIT_STATUS.internal;
}

/**
 * What happens when standard output cannot be written. A reader that stops early (`quern ngrams
 * job | head`) closes the pipe, and the next write fails with EPIPE: the output is not wanted any
 * more, so the command ends there, quietly, with status 0 (as a program killed by SIGPIPE would stop,
 * which Node prevents). Any other failure (a full disk under `> file`) is an io error, status 4.
 */
export function onStdoutError(error: NodeJS.ErrnoException): never {
  if (error.code === 'EPIPE') process.exit(0);
  process.stderr.write(`quern: writing the output failed: ${error.message}\n`);
  process.exit(EXIT_STATUS.io);
}
