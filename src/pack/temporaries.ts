/**
 * The temporary files a pack has open (the model's own, `FILE.PID.tmp`, and its spools), so that a
 * command stopped by a signal can delete them before it exits (`removePackTemporariesSync`): a
 * killed pack would otherwise leave gigabytes of `*.tmp` files beside the model. The writer adds a
 * file before it creates it and removes it from the set once the file is renamed or deleted.
 */
import { rmSync } from 'node:fs';

const live = new Set<string>();

export function trackTemporary(filePath: string): void {
  live.add(filePath);
}

export function untrackTemporary(filePath: string): void {
  live.delete(filePath);
}

/** Deletes every temporary file of a pack in progress (synchronously: for signal handlers, right
 *  before the process exits); returns their paths. */
export function removePackTemporariesSync(): string[] {
  const removed = [...live];
  for (const filePath of removed) rmSync(filePath, { force: true });
  live.clear();
  return removed;
}
