import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    // The JSON report lets .ci/run print its one-line summary.
    reporters: ['default', ['json', { outputFile: 'test/artifacts/vitest-results.json' }]],
    testTimeout: 20_000,
  },
});
