/**
 * SIGINT and SIGTERM while a command packs a model file: the file is written under a temporary name
 * and renamed only when complete, so stopping at once is safe, but the temporary files (the model's
 * and the spools of its sections, gigabytes for a large model) would stay. The handlers let the row
 * threads of a pack from a job leave any section they must not be ended in (quiesceRowThreads:
 * process.exit ends them), delete the temporaries (pack/temporaries.ts), say so, and exit non-zero
 * (job/interrupt.ts).
 */
import { quiesceRowThreads } from '../estimate/job-model-source.ts';
import { exitOnStopSignals } from '../job/interrupt.ts';
import { removePackTemporariesSync } from '../pack/temporaries.ts';

/** Runs `work` (a pack into `out`) with the handlers installed. */
export async function withPackCleanup<T>(out: string, work: () => Promise<T>): Promise<T> {
  const remove = exitOnStopSignals((signal) => {
    quiesceRowThreads();
    const removed = removePackTemporariesSync();
    process.stderr.write(`\nquern: stopped by ${signal} while packing ${out}; it was not written (an earlier file there is unchanged)${removed.length > 0 ? `, and the pack's ${removed.length} temporary files are deleted` : ''}\n`);
  });
  try {
    return await work();
  } finally {
    remove();
  }
}
