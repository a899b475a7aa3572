/**
 * The one small file-system interface that every stage writes through, so tests can inject
 * faults (fail after N operations, once or from then on; a full disk) without touching the stages.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { ioError } from '../errors.ts';

/** A file opened for writing, appended to in order (`writeAt` for what is known only at the end). */
export interface WritableFile {
  /** Appends `data`. */
  write(data: Uint8Array): Promise<void>;
  /** Writes `data` at byte `position`, over what is there (a header known only at the end). */
  writeAt(data: Uint8Array, position: number): Promise<void>;
  /** Flushes to stable storage. */
  sync(): Promise<void>;
  close(): Promise<void>;
}

export interface StageFs {
  /** Creates (truncating) a file for writing. */
  create(filePath: string): Promise<WritableFile>;
  rename(from: string, to: string): Promise<void>;
  unlink(filePath: string): Promise<void>;
  mkdir(dirPath: string): Promise<void>;
  /** Flushes a directory's entries (after a rename) to stable storage. */
  syncDir(dirPath: string): Promise<void>;
}

class NodeWritableFile implements WritableFile {
  constructor(private readonly handle: fsp.FileHandle, private readonly filePath: string) {}
  write(data: Uint8Array): Promise<void> {
    return this.writeFully(data, null);
  }
  writeAt(data: Uint8Array, position: number): Promise<void> {
    return this.writeFully(data, position);
  }
  /** All of `data`, at `position` (null: where the last write ended), in as many calls as it takes. */
  private async writeFully(data: Uint8Array, position: number | null): Promise<void> {
    try {
      let offset = 0;
      while (offset < data.byteLength) {
        const { bytesWritten } = await this.handle.write(data, offset, data.byteLength - offset, position === null ? null : position + offset);
        offset += bytesWritten;
      }
    } catch (cause) {
      throw ioError('write', this.filePath, cause);
    }
  }
  async sync(): Promise<void> {
    try { await this.handle.sync(); } catch (cause) { throw ioError('sync', this.filePath, cause); }
  }
  async close(): Promise<void> {
    try { await this.handle.close(); } catch (cause) { throw ioError('close', this.filePath, cause); }
  }
}

/** The real file system. */
export const nodeFs: StageFs = {
  async create(filePath) {
    try {
      return new NodeWritableFile(await fsp.open(filePath, 'w'), filePath);
    } catch (cause) {
      throw ioError('create', filePath, cause);
    }
  },
  async rename(from, to) {
    try { await fsp.rename(from, to); } catch (cause) { throw ioError('rename', `${from} to ${to}`, cause); }
  },
  async unlink(filePath) {
    try { await fsp.rm(filePath, { force: true }); } catch (cause) { throw ioError('remove', filePath, cause); }
  },
  async mkdir(dirPath) {
    try { await fsp.mkdir(dirPath, { recursive: true }); } catch (cause) { throw ioError('create directory', dirPath, cause); }
  },
  async syncDir(dirPath) {
    let handle: fsp.FileHandle | undefined;
    try {
      handle = await fsp.open(dirPath, 'r');
      await handle.sync();
    } catch (cause) {
      throw ioError('sync directory', dirPath, cause);
    } finally {
      await handle?.close();
    }
  },
};

/** The temporary name `writeFileThrough` writes `filePath` under until it is complete. */
export function temporaryPathOf(filePath: string): string {
  return `${filePath}.${process.pid}.tmp`;
}

/**
 * Writes a file atomically through `write`, which appends to it: a temporary file beside it, fsync,
 * rename, fsync of the directory. A crash or a failure leaves either the old file or the new one,
 * never a half-written one (the temporary file is removed on failure).
 */
export async function writeFileThrough(fs: StageFs, filePath: string, write: (file: WritableFile) => Promise<void>): Promise<void> {
  const tmpPath = temporaryPathOf(filePath);
  const file = await fs.create(tmpPath);
  try {
    try {
      await write(file);
      await file.sync();
    } finally {
      await file.close();
    }
    await fs.rename(tmpPath, filePath);
  } catch (error) {
    await fs.unlink(tmpPath).catch(() => undefined);
    throw error;
  }
  // A failure here leaves the complete new file in place (the previous one is gone already): the
  // caller hears of it and does not record the file as durable.
  await fs.syncDir(path.dirname(filePath));
}

/** Writes `data` to `filePath` atomically (writeFileThrough). */
export async function writeFileAtomic(fs: StageFs, filePath: string, data: Uint8Array | string): Promise<void> {
  const bytes = typeof data === 'string' ? Buffer.from(data, 'utf8') : data;
  await writeFileThrough(fs, filePath, (file) => file.write(bytes));
}

export interface FaultPlan {
  /** Operations that succeed before the first failure. */
  failAfterOperations: number;
  /** 'once': only the next operation fails; 'always': every operation from then on fails. */
  mode: 'once' | 'always';
  /** errno code of the injected failure, e.g. 'EIO' or 'ENOSPC'. */
  errno: string;
}

/** Wraps a StageFs so that operations fail according to `plan` (tests only). */
export function faultyFs(base: StageFs, plan: FaultPlan): StageFs & { operations: () => number } {
  let operations = 0;
  let failed = false;
  const check = (what: string, target: string): void => {
    operations += 1;
    if (operations <= plan.failAfterOperations) return;
    if (plan.mode === 'once' && failed) return;
    failed = true;
    const cause = Object.assign(new Error(`${plan.errno}: injected fault`), { code: plan.errno });
    throw ioError(what, target, cause);
  };
  return {
    operations: () => operations,
    async create(filePath) {
      check('create', filePath);
      const file = await base.create(filePath);
      return {
        write: async (data) => { check('write', filePath); await file.write(data); },
        writeAt: async (data, position) => { check('write', filePath); await file.writeAt(data, position); },
        sync: async () => { check('sync', filePath); await file.sync(); },
        close: () => file.close(),
      };
    },
    async rename(from, to) { check('rename', from); await base.rename(from, to); },
    async unlink(filePath) { check('remove', filePath); await base.unlink(filePath); },
    async mkdir(dirPath) { check('create directory', dirPath); await base.mkdir(dirPath); },
    async syncDir(dirPath) { check('sync directory', dirPath); await base.syncDir(dirPath); },
  };
}

/** Environment variable that injects faults into every StageFs of the process (tests only). */
export const FAULT_ENV = 'QUERN_TEST_FAULT';

/**
 * The StageFs a stage should use: the real file system, wrapped with the fault plan given as JSON
 * in QUERN_TEST_FAULT when that is set (each thread counts its own operations).
 */
export function stageFs(): StageFs {
  const plan = process.env[FAULT_ENV];
  if (!plan) return nodeFs;
  return faultyFs(nodeFs, JSON.parse(plan) as FaultPlan);
}
