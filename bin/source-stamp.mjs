// The stamp of a source tree: every file under it, path and contents, digested. `npm run build`
// (scripts/build.mjs) writes the stamp of src/ beside the JavaScript it compiles into dist/;
// bin/quern.js runs dist/ only while src/ still has that stamp, so an edited, added or removed
// source file sends it back to the sources (through tsx) until the next build. Contents, not
// modification times, so that a checkout or an unpacked package with the same sources keeps its
// build: reading and hashing src/ (~130 files, 1.4 MB) took 6.7 ms the first time in a process, as
// at a start (`npm run bench:startup`, 2026-12-04).
import { createHash } from 'node:crypto';
import { readdirSync, readFileSync } from 'node:fs';
import { join, relative, sep } from 'node:path';

/** The file holding the stamp of the sources dist/ was compiled from. */
export const STAMP_FILE = '.source-stamp';

/** A hex digest of every regular file under `root`: its path (relative, '/') and its bytes. */
export function sourceStamp(root) {
  const files = [];
  for (const entry of readdirSync(root, { recursive: true, withFileTypes: true })) {
    if (entry.isFile()) files.push(relative(root, join(entry.parentPath ?? entry.path, entry.name)).split(sep).join('/'));
  }
  files.sort();
  const hash = createHash('sha256');
  for (const file of files) {
    const bytes = readFileSync(join(root, file));
    hash.update(`${file}\0${bytes.length}\0`);
    hash.update(bytes);
  }
  return hash.digest('hex');
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
