/**
 * Sections of a worker thread's work that the thread must not be stopped in, and the means for the
 * main thread to stop workers between them.
 *
 * Why: lmdb (3.5.6) cannot have a thread terminated inside a synchronous write transaction. Its
 * `beginTxn` locks the environment's writing mutex and only `commitTxn` or `abortTxn` unlock it;
 * once a thread is terminated (Worker.terminate, or process.exit, which terminates every worker)
 * neither runs, and the addon's cleanup hook, run as the thread ends, locks that mutex again
 * (EnvWrap::cleanupStrayTxns): the thread waits for itself forever, and so does whoever joins it.
 * A SIGINT or SIGTERM that reached `quern count` while a worker was inside a commit of the merge hung
 * the process that way.
 *
 * A gate is two words of a SharedArrayBuffer, [closed, sections running], shared by the main thread
 * (WorkerPool) and its workers. A worker runs each such section through `run`; the main thread
 * calls `close` before it terminates workers: no section starts from then on, and `close` returns
 * once the running ones have ended.
 */
import { assert } from '../errors.ts';

const CLOSED = 0;
const RUNNING = 1;

export class StopGate {
  readonly words: Int32Array;

  /** @param buffer the shared words of a gate made in another thread; a new gate when absent */
  constructor(buffer: SharedArrayBuffer = new SharedArrayBuffer(2 * Int32Array.BYTES_PER_ELEMENT)) {
    assert(buffer.byteLength === 2 * Int32Array.BYTES_PER_ELEMENT, `a stop gate is 2 words, not ${buffer.byteLength} bytes`);
    this.words = new Int32Array(buffer);
  }

  /** The shared words, to hand to a worker (workerData). */
  get buffer(): SharedArrayBuffer {
    return this.words.buffer as SharedArrayBuffer;
  }

  get closed(): boolean {
    return Atomics.load(this.words, CLOSED) !== 0;
  }

  /**
   * Runs the synchronous `section` while the gate is open. A thread that finds it closed waits
   * there without running it until it is terminated: the gate is closed only to stop the thread.
   */
  run<T>(section: () => T): T {
    this.enter();
    try {
      return section();
    } finally {
      this.leave();
    }
  }

  /**
   * `run` for an asynchronous section: a worker loading its modules (worker-boot.mjs), whose
   * native addons (lmdb's) abort the process when their thread is ended while they register. The
   * thread stays counted as running until `section` settles, so the section must not wait on the
   * thread that closes the gate.
   */
  async runAsync<T>(section: () => Promise<T>): Promise<T> {
    this.enter();
    try {
      return await section();
    } finally {
      this.leave();
    }
  }

  /** Waits while the gate is closed, then counts this thread as running a section. */
  private enter(): void {
    const words = this.words;
    for (;;) {
      while (Atomics.load(words, CLOSED) !== 0) Atomics.wait(words, CLOSED, 1);
      Atomics.add(words, RUNNING, 1);
      // Closed between the check and the count: `close` may have seen no section running.
      if (Atomics.load(words, CLOSED) === 0) return;
      this.leave();
    }
  }

  /**
   * Closes the gate and returns once no section is running (each is one write transaction, so the
   * wait is as long as the rest of a commit). Blocks the calling thread; call it from the main thread.
   */
  close(): void {
    const words = this.words;
    Atomics.store(words, CLOSED, 1);
    for (let running = Atomics.load(words, RUNNING); running !== 0; running = Atomics.load(words, RUNNING)) {
      assert(running > 0, `${running} sections running`);
      Atomics.wait(words, RUNNING, running);
    }
  }

  private leave(): void {
    Atomics.sub(this.words, RUNNING, 1);
    Atomics.notify(this.words, RUNNING);
  }
}

/** This thread's gate (a worker's, set when it starts); none in the main thread. */
let threadGate: StopGate | undefined;

/** Makes `gate` the one every stop-sensitive section of this thread goes through. */
export function installStopGate(gate: StopGate): void {
  threadGate = gate;
}

/** Runs `section` through this thread's gate, or at once when the thread has none. */
export function runUnstoppable<T>(section: () => T): T {
  return threadGate === undefined ? section() : threadGate.run(section);
}
