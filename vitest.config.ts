import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['tests/**/*.test.ts'],
    setupFiles: ['tests/helpers/setup.ts'],
    testTimeout: 120_000,
    hookTimeout: 120_000,
    // Integration tests share two cores with PostgreSQL and Redis: more forks only add contention.
    maxWorkers: 2,
    fileParallelism: true,
  },
});
