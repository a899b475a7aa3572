/**
 * StopGate (src/job/stop-gate.ts): a worker thread is stopped between its store's write
 * transactions, never inside one. lmdb 3.5.6 cannot end a thread terminated inside one (its cleanup
 * hook waits for the transaction's lock forever): that hung `quern count` on SIGINT/SIGTERM.
 */
import { spawn } from 'node:child_process';
import { rmSync } from 'node:fs';
import * as path from 'node:path';
import { Worker } from 'node:worker_threads';
import { describe, expect, it } from 'vitest';
import { StopGate } from '../../src/job/stop-gate.ts';
import { REPO, tempDir } from '../support/cli.ts';

const WORKER = new URL('../support/stop-gate-worker.ts', import.meta.url).href;
const BOOT = new URL('../../src/count/worker-boot.mjs', import.meta.url);
const SLOW_LOAD_WORKER = new URL('../support/slow-load-worker.ts', import.meta.url).href;

describe('StopGate', () => {
  it('a worker told to stop while inside a store commit finishes that commit, then ends', async () => {
    // In a child process: without the gate the worker, and so the process, never end.
    const scratch = tempDir('quern-stop-gate-');
    const dir = path.join(scratch, 'store');
    const insideMs = 500;
    const child = spawn(process.execPath, ['--import', 'tsx', path.join(REPO, 'test/support/stop-gate-child.ts'), dir, String(insideMs)], {
      cwd: REPO, stdio: ['ignore', 'pipe', 'pipe'],
    });
    let stdout = '';
    let stderr = '';
    child.stdout.setEncoding('utf8').on('data', (d: string) => { stdout += d; });
    child.stderr.setEncoding('utf8').on('data', (d: string) => { stderr += d; });
    const ended = new Promise<number | null>((resolve) => child.on('close', (status) => resolve(status)));
    const deadline = new Promise<'hung'>((resolve) => setTimeout(() => resolve('hung'), 20_000));
    const outcome = await Promise.race([ended, deadline]);
    if (outcome === 'hung') {
      child.kill('SIGKILL');
      await ended;
    }
    rmSync(scratch, { recursive: true, force: true });
    expect(outcome, `the stopped worker did not end (stuck inside its write transaction): ${stderr}`).toBe(0);
    const { closeMs, terminateMs, transactions } = JSON.parse(stdout) as { closeMs: number; terminateMs: number; transactions: number };
    // close() waited for the rest of the commit the worker was in, and no commit began after it.
    expect(closeMs).toBeGreaterThanOrEqual(insideMs - 100);
    expect(terminateMs).toBeLessThan(5_000);
    expect(transactions).toBe(3);
  }, 30_000);

  it('close() returns once the running section has ended, and no section starts after it', async () => {
    const gate = new StopGate();
    // [inside a section (0/1), sections finished]
    const flags = new Int32Array(new SharedArrayBuffer(8));
    const worker = new Worker(BOOT, { workerData: { module: WORKER, stopGate: gate.buffer, mode: 'section', flags: flags.buffer } });
    try {
      worker.postMessage('start');
      await new Promise((resolve) => worker.once('message', resolve));
      while (Atomics.load(flags, 0) === 0) await new Promise((resolve) => setTimeout(resolve, 5));
      expect(gate.closed).toBe(false);
      gate.close();
      expect(gate.closed).toBe(true);
      expect(Atomics.load(flags, 0), 'a section is running after close()').toBe(0);
      const finished = Atomics.load(flags, 1);
      expect(finished).toBeGreaterThanOrEqual(1);
      await new Promise((resolve) => setTimeout(resolve, 300));
      expect(Atomics.load(flags, 1), 'sections finished after close()').toBe(finished);
      expect(Atomics.load(flags, 0)).toBe(0);
    } finally {
      await worker.terminate();
    }
  });

  it('a worker is loaded through its gate: close() while its modules load returns once they have loaded (lmdb\'s addon must not be ended while it registers)', async () => {
    const gate = new StopGate();
    const flags = new Int32Array(new SharedArrayBuffer(8)); // [loading began, loading ended]
    const loadMs = 400;
    const worker = new Worker(BOOT, { workerData: { module: SLOW_LOAD_WORKER, stopGate: gate.buffer, flags: flags.buffer, loadMs } });
    try {
      while (Atomics.load(flags, 0) === 0) await new Promise((resolve) => setTimeout(resolve, 5));
      expect(Atomics.load(flags, 1)).toBe(0);
      const started = performance.now();
      gate.close();
      expect(Atomics.load(flags, 1), 'close() returned while the worker was still loading').toBe(1);
      expect(performance.now() - started).toBeGreaterThan(100);
    } finally {
      await worker.terminate();
    }
  });

  it('run() returns what the section returns and passes its errors on; close() with none running returns at once', () => {
    const gate = new StopGate();
    expect(gate.run(() => 7)).toBe(7);
    expect(() => gate.run(() => { throw new Error('inside'); })).toThrow('inside');
    gate.close(); // nothing running: returns at once, even after a section that threw
    expect(gate.closed).toBe(true);
    gate.close();
    expect(gate.closed).toBe(true);
  });
});
