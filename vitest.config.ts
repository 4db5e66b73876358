import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['tests/**/*.test.ts'],
    testTimeout: 60_000,
    hookTimeout: 120_000,
    pool: 'forks',
    // Real servers (InfluxDB 1.x, VictoriaMetrics) are started per test file on free ports.
    fileParallelism: true,
    maxWorkers: 2,
  },
});
