/** Where run files live in the job directory: runs/o{order}/p{partition}/c{chunk}-s{spill}.run */
import * as path from 'node:path';

export const RUNS_DIR = 'runs';

/** Path of a run file relative to the job directory. */
export function runFilePath(order: number, partition: number, chunk: number, spill: number): string {
  const p = String(partition).padStart(4, '0');
  const c = String(chunk).padStart(6, '0');
  const s = String(spill).padStart(3, '0');
  return path.join(RUNS_DIR, `o${order}`, `p${p}`, `c${c}-s${s}.run`);
}

/** Directory holding every run of one order and partition, relative to the job directory. */
export function partitionRunsDir(order: number, partition: number): string {
  return path.join(RUNS_DIR, `o${order}`, `p${String(partition).padStart(4, '0')}`);
}
