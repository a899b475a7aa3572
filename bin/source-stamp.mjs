// The stamp of a source tree: every file under it with its size and modification time, digested.
// `npm run build` (scripts/build.mjs) writes the stamp of src/ beside the JavaScript it compiles
// into dist/; bin/quern.js runs dist/ only while src/ still has that stamp, so an edited, added or
// removed source file sends it back to the sources (through tsx) until the next build. Sizes and
// times, not contents: ~130 stats cost about a millisecond at every start, reading 1.4 MB would not.
import { createHash } from 'node:crypto';
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { join, relative, sep } from 'node:path';

/** The file holding the stamp of the sources dist/ was compiled from. */
export const STAMP_FILE = '.source-stamp';

/** A hex digest of every regular file under `root`: its path (relative, '/'), size and mtime. */
export function sourceStamp(root) {
  const lines = [];
  for (const entry of readdirSync(root, { recursive: true, withFileTypes: true })) {
    if (!entry.isFile()) continue;
    const file = join(entry.parentPath ?? entry.path, entry.name);
    const stats = statSync(file);
    lines.push(`${relative(root, file).split(sep).join('/')}\t${stats.size}\t${stats.mtimeMs}`);
  }
  lines.sort();
  return createHash('sha256').update(lines.join('\n')).digest('hex');
}

/** True when `built` holds a stamp equal to `sources`' current one (false when it has none, or
 *  when either cannot be read: the sources then run, and say what is wrong if they cannot). */
export function builtFrom(built, sources) {
  try {
    return readFileSync(join(built, STAMP_FILE), 'utf8').trim() === sourceStamp(sources);
  } catch {
    return false;
  }
}
