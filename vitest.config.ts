import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts', 'src/**/*.test.ts'],
    testTimeout: 60_000,
    hookTimeout: 60_000,
    // The JSON report is what .ci/run counts; the default reporter is for people.
    reporters: ['default', ['json', { outputFile: '.vitest-report.json' }]],
    pool: 'forks',
  },
});
