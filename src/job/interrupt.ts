/**
 * SIGINT and SIGTERM while a job runs: everything a stage recorded is durable at every moment, so
 * stopping at once is safe. Let the workers' write transactions end (process.exit terminates the
 * workers, and a worker terminated inside one never ends: stop-gate.ts), release the lock, say how
 * to resume, exit non-zero.
 */
import { rmSync } from 'node:fs';

export const EXIT_ON_SIGNAL: Record<string, number> = { SIGINT: 130, SIGTERM: 143 };

/**
 * Installs the handlers; returns a function that removes them. `quiesce` (WorkerPool.quiesce) runs
 * first: it returns once no worker is in a section it must not be stopped in.
 */
export function stopCleanlyOnSignals(jobDir: string, lockFile: string, resumeHint: string, quiesce: () => void): () => void {
  const handlers = Object.keys(EXIT_ON_SIGNAL).map((signal) => {
    const handler = (): void => {
      quiesce();
      rmSync(lockFile, { force: true });
      process.stderr.write(`\nquern: stopped by ${signal}. The job in ${jobDir} keeps all finished work; ${resumeHint}\n`);
      process.exit(EXIT_ON_SIGNAL[signal]);
    };
    process.once(signal, handler);
    return [signal, handler] as const;
  });
  return () => {
    for (const [signal, handler] of handlers) process.removeListener(signal, handler);
  };
}
