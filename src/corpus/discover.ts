/**
 * Shard discovery: turns the input specs of a command (files, directories, glob patterns) into the
 * sorted list of input files of a job, each with its format, gzip flag and fingerprint.
 */
import { createHash } from 'node:crypto';
import { promises as fsp, type Dirent } from 'node:fs';
import * as path from 'node:path';
import pLimit from 'p-limit';
import { glob, isDynamicPattern } from 'tinyglobby';
import { ioError, QuernError } from '../errors.ts';
import { DISCOVER_FILES_OPEN_MAX, FINGERPRINT_EDGE_BYTES } from '../limits.ts';
import { readFullyAt } from '../job/file-read.ts';
import type { InputFile, InputFormat } from './types.ts';

export interface DiscoverOptions {
  /** Format of every input; when absent it is taken from each file's name (see `formatFromName`). */
  format?: InputFormat;
}

/** Names that mean JSONL when no format is given. Anything else is plain text. */
const JSONL_SUFFIXES = ['.jsonl', '.jsonl.gz', '.ndjson', '.ndjson.gz'];

/** The format implied by a file name: JSONL for `.jsonl`, `.jsonl.gz`, `.ndjson`, `.ndjson.gz`
 *  (case-insensitive), text otherwise. */
export function formatFromName(filePath: string): InputFormat {
  const name = path.basename(filePath).toLowerCase();
  return JSONL_SUFFIXES.some((suffix) => name.endsWith(suffix)) ? 'jsonl' : 'text';
}

/**
 * Resolves input specs to input files, sorted by absolute path (code-unit order) and de-duplicated.
 *
 * Each spec is tried first as an existing path: a regular file is taken as is; a directory is
 * walked recursively for regular files (entries whose name starts with '.' are skipped, and so are
 * symbolic links to directories, which could form cycles; links to files are followed). A spec
 * that is not an existing path is used as a glob pattern (tinyglobby, relative to the current
 * directory, dotfiles excluded).
 *
 * @throws QuernError('config') when `specs` is empty; QuernError('input') "no input matches <spec>"
 *   when a spec yields no file; an 'io' QuernError naming the path when a file cannot be read.
 */
export async function discoverInputs(specs: string[], opts: DiscoverOptions = {}): Promise<InputFile[]> {
  if (specs.length === 0) {
    throw new QuernError('config', 'specs: at least one input file, directory or glob pattern is required');
  }
  if (opts.format !== undefined && opts.format !== 'text' && opts.format !== 'jsonl') {
    throw new QuernError('config', `format: must be 'text' or 'jsonl', got ${JSON.stringify(opts.format)}`);
  }
  const paths = new Set<string>();
  for (const spec of specs) {
    const found = await expandSpec(spec);
    if (found.length === 0) throw new QuernError('input', `no input matches ${spec}`);
    for (const filePath of found) paths.add(filePath);
  }
  const sorted = [...paths].sort(compareCodeUnits);
  const limit = pLimit(DISCOVER_FILES_OPEN_MAX);
  return Promise.all(sorted.map((filePath) => limit(() => describeInput(filePath, opts.format ?? formatFromName(filePath)))));
}

function compareCodeUnits(a: string, b: string): number {
  return a < b ? -1 : a > b ? 1 : 0;
}

/** Absolute paths of the regular files a spec stands for (possibly none). */
async function expandSpec(spec: string): Promise<string[]> {
  const absolute = path.resolve(spec);
  let stat;
  try {
    stat = await fsp.stat(absolute);
  } catch (cause) {
    const code = (cause as NodeJS.ErrnoException).code;
    if (code !== 'ENOENT' && code !== 'ENOTDIR') throw ioError('read', absolute, cause);
    if (!isDynamicPattern(spec)) return [];
    try {
      const matches = await glob(spec, { absolute: true, onlyFiles: true, dot: false });
      return matches.map((match) => path.resolve(match));
    } catch (globCause) {
      throw ioError('search', spec, globCause);
    }
  }
  if (stat.isFile()) return [absolute];
  if (stat.isDirectory()) return walkDirectory(absolute);
  throw new QuernError('input', `${absolute} is neither a regular file nor a directory`);
}

/** Regular files under `dir`, recursively, skipping dot entries and links to directories. */
async function walkDirectory(dir: string): Promise<string[]> {
  const files: string[] = [];
  const pending = [dir];
  while (pending.length > 0) {
    const current = pending.pop() as string;
    let entries: Dirent[];
    try {
      entries = await fsp.readdir(current, { withFileTypes: true });
    } catch (cause) {
      throw ioError('list directory', current, cause);
    }
    for (const entry of entries) {
      if (entry.name.startsWith('.')) continue;
      const entryPath = path.join(current, entry.name);
      if (entry.isDirectory()) pending.push(entryPath);
      else if (entry.isFile()) files.push(entryPath);
      else if (entry.isSymbolicLink() && (await isLinkToFile(entryPath))) files.push(entryPath);
    }
  }
  return files;
}

async function isLinkToFile(linkPath: string): Promise<boolean> {
  try {
    return (await fsp.stat(linkPath)).isFile();
  } catch (cause) {
    if ((cause as NodeJS.ErrnoException).code === 'ENOENT') return false; // a dangling link is no input
    throw ioError('read', linkPath, cause);
  }
}

/** Opens one input and reads what the manifest records about it: size, gzip magic, fingerprint. */
async function describeInput(filePath: string, format: InputFormat): Promise<InputFile> {
  let handle: fsp.FileHandle | undefined;
  try {
    handle = await fsp.open(filePath, 'r');
    const stat = await handle.stat();
    const bytes = stat.size;
    const edgeBytes = Math.min(bytes, FINGERPRINT_EDGE_BYTES);
    const shrank = (): QuernError => new QuernError('input', `${filePath} shrank while it was being read (expected ${bytes} bytes)`);
    const head = Buffer.alloc(edgeBytes);
    await readFullyAt(handle, filePath, head, 0, shrank);
    let tail = head;
    if (bytes > FINGERPRINT_EDGE_BYTES) {
      tail = Buffer.alloc(edgeBytes);
      await readFullyAt(handle, filePath, tail, bytes - edgeBytes, shrank);
    }
    return {
      path: filePath,
      bytes,
      mtimeMs: stat.mtimeMs,
      gzip: head.length >= 2 && head[0] === 0x1f && head[1] === 0x8b,
      format,
      fingerprint: fingerprintOf(bytes, head, tail),
    };
  } catch (cause) {
    throw cause instanceof QuernError ? cause : ioError('read', filePath, cause);
  } finally {
    await handle?.close();
  }
}

/**
 * sha256 (hex) over the size as a big-endian uint64, then the first and the last
 * min(size, FINGERPRINT_EDGE_BYTES) bytes (the two overlap, or are the same bytes, for small files).
 */
export function fingerprintOf(bytes: number, head: Uint8Array, tail: Uint8Array): string {
  const size = Buffer.alloc(8);
  size.writeBigUInt64BE(BigInt(bytes));
  return createHash('sha256').update(size).update(head).update(tail).digest('hex');
}

