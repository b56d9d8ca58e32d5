import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    // The JSON report lets .ci/run print its one-line summary.
    reporters: ['default', ['json', { outputFile: 'test/artifacts/vitest-results.json' }]],
    // A cap, not a measure: on a loaded 2-core machine a whole simulated run can take several
    // times as long as when quiet, and no test may fail for that alone.
    testTimeout: 120_000,
    hookTimeout: 120_000,
  },
});
