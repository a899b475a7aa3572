/**
 * Results that finish in any order, consumed in index order 0, 1, 2, …: `offer(i, value)` resolves
 * once value i has been consumed, so a producer that awaits it (a worker given its next task only
 * then) holds at most one waiting result. The result with the lowest index not yet consumed is
 * always being produced (tasks are handed out in index order), so no producer waits forever.
 */
import { assert } from '../errors.ts';

export class InOrder<T> {
  private next = 0;
  private readonly waiting = new Map<number, { value: T; resolve: () => void; reject: (error: unknown) => void }>();
  /** Consumption so far, in order: each `consume` starts when the previous one has ended. */
  private chain: Promise<void> = Promise.resolve();
  private failed = false;
  private failure: unknown;

  constructor(private readonly consume: (value: T) => Promise<void> | void) {}

  /** Hands over result `index` (each index once); resolves when it has been consumed. */
  offer(index: number, value: T): Promise<void> {
    assert(index >= this.next && !this.waiting.has(index), `result ${index} offered once`);
    const done = new Promise<void>((resolve, reject) => this.waiting.set(index, { value, resolve, reject }));
    this.drain();
    return done;
  }

  /** Index of the next result to be consumed. */
  get consumed(): number {
    return this.next;
  }

  private drain(): void {
    for (let entry = this.waiting.get(this.next); entry !== undefined; entry = this.waiting.get(this.next)) {
      this.waiting.delete(this.next);
      this.next++;
      const { value, resolve, reject } = entry;
      // After a failed `consume`, the later results are not consumed: their offers fail with it.
      this.chain = this.chain
        .then(() => {
          if (this.failed) throw this.failure;
          return this.consume(value);
        })
        .then(resolve, (error: unknown) => {
          if (!this.failed) {
            this.failed = true;
            this.failure = error;
          }
          reject(error);
        });
    }
  }
}
