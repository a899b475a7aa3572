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
