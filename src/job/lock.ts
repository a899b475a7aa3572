/**
 * A lock file that keeps two processes off one job. It holds the owner's pid; a lock whose process
 * is gone is stale and taken over.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';

export const LOCK_FILE = 'job.lock';

function processAlive(pid: number): boolean {
  try {
    process.kill(pid, 0);
    return true;
  } catch (error) {
    return (error as NodeJS.ErrnoException).code === 'EPERM';
  }
}

export interface JobLock {
  /** The lock file's path. */
  file: string;
  release(): Promise<void>;
}

/** Takes the job's lock, taking over a stale one; throws 'config' if a live process holds it. */
export async function lockJob(jobDir: string): Promise<JobLock> {
  const file = path.join(jobDir, LOCK_FILE);
  for (let attempt = 0; attempt < 2; attempt++) {
    try {
      const handle = await fsp.open(file, 'wx');
      await handle.writeFile(`${process.pid}\n`);
      await handle.close();
      return { file, release: () => fsp.rm(file, { force: true }) };
    } catch (error) {
      if ((error as NodeJS.ErrnoException).code !== 'EEXIST') {
        throw new QuernError('io', `cannot create lock ${file}: ${(error as Error).message}`, { cause: error });
      }
      const pid = Number((await fsp.readFile(file, 'utf8').catch(() => '')).trim());
      if (Number.isInteger(pid) && pid > 0 && pid !== process.pid && processAlive(pid)) {
        throw new QuernError('config', `job ${jobDir} is in use by process ${pid} (lock ${file})`);
      }
      await fsp.rm(file, { force: true });
    }
  }
  throw new QuernError('io', `cannot take the lock ${file}`);
}
