import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    testTimeout: 60_000,
    hookTimeout: 60_000,
    // Tests spawn CLI processes and worker threads: two files at a time keeps 2 cores busy.
    maxWorkers: 2,
  },
});
