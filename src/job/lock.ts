/**
 * A lock file that keeps two processes off one job. It holds the owner's pid; a lock whose process
 * is gone is stale and taken over.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';

export const LOCK_FILE = 'job.lock';

/** Rounds of (create, find stale, take over) before giving up: each round another process won. */
const LOCK_ATTEMPTS_MAX = 5;

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
  for (let attempt = 0; attempt < LOCK_ATTEMPTS_MAX; attempt++) {
    try {
      // The lock appears with its pid already in it (link of a written file), so no other process
      // can read it empty and mistake it for a stale one.
      const mine = `${file}.${process.pid}`;
      await fsp.writeFile(mine, `${process.pid}\n`);
      try {
        await fsp.link(mine, file);
      } finally {
        await fsp.rm(mine, { force: true });
      }
      return { file, release: () => fsp.rm(file, { force: true }) };
    } catch (error) {
      if ((error as NodeJS.ErrnoException).code !== 'EEXIST') {
        throw new QuernError('io', `cannot create lock ${file}: ${(error as Error).message}`, { cause: error });
      }
      const pid = Number((await fsp.readFile(file, 'utf8').catch(() => '')).trim());
      if (Number.isInteger(pid) && pid > 0 && pid !== process.pid && processAlive(pid)) {
        throw new QuernError('config', `job ${jobDir} is in use by process ${pid} (lock ${file})`);
      }
      // Take the stale lock over by renaming it: of several processes that found it stale, only
      // one rename succeeds; the others retry and find the new owner alive.
      const stale = `${file}.stale.${process.pid}`;
      try {
        await fsp.rename(file, stale);
        const taken = Number((await fsp.readFile(stale, 'utf8').catch(() => '')).trim());
        if (taken !== pid && Number.isInteger(taken) && taken > 0 && processAlive(taken)) {
          // Another process replaced the stale lock between our read and our rename: give it back
          // (link fails if yet another lock exists meanwhile, which then stays the owner).
          await fsp.link(stale, file).catch(() => undefined);
        }
        await fsp.rm(stale, { force: true });
      } catch (error) {
        if ((error as NodeJS.ErrnoException).code !== 'ENOENT') throw new QuernError('io', `cannot take over the lock ${file}: ${(error as Error).message}`, { cause: error });
      }
    }
  }
  throw new QuernError('io', `cannot take the lock ${file}`);
}
