import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    testTimeout: 120_000,
    hookTimeout: 120_000,
    // The machine has two cores; the service tests start real servers and time-sensitive streams.
    maxWorkers: 2,
    reporters: process.env['CI'] ? ['verbose'] : ['default'],
  },
});
