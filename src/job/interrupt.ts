/**
 * SIGINT and SIGTERM while a job runs: everything a stage recorded is durable at every moment, so
 * stopping at once is safe. Let the workers' write transactions end (process.exit terminates the
 * workers, and a worker terminated inside one never ends: stop-gate.ts), release the lock, say how
 * to resume, exit non-zero.
 */
import { rmSync } from 'node:fs';

const EXIT_ON_SIGNAL: Record<string, number> = { SIGINT: 130, SIGTERM: 143 };

/**
 * Installs a handler for SIGINT and SIGTERM that runs `onStop(signal)` (synchronous: clean up, say
 * what happened) and exits with the signal's status (130, 143); returns a function that removes it.
 */
export function exitOnStopSignals(onStop: (signal: string) => void): () => void {
  const handlers = Object.keys(EXIT_ON_SIGNAL).map((signal) => {
    const handler = (): void => {
      onStop(signal);
      process.exit(EXIT_ON_SIGNAL[signal]);
    };
    process.once(signal, handler);
    return [signal, handler] as const;
  });
  return () => {
    for (const [signal, handler] of handlers) process.removeListener(signal, handler);
  };
}

/**
 * Installs the handlers; returns a function that removes them. `quiesce` (WorkerPool.quiesce) runs
 * first: it returns once no worker is in a section it must not be stopped in.
 */
export function stopCleanlyOnSignals(jobDir: string, lockFile: string, resumeHint: string, quiesce: () => void): () => void {
  return exitOnStopSignals((signal) => {
    quiesce();
    rmSync(lockFile, { force: true });
    process.stderr.write(`\nquern: stopped by ${signal}. The job in ${jobDir} keeps all finished work; ${resumeHint}\n`);
  });
}
