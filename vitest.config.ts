import { defineConfig, type Plugin } from 'vitest/config';

/** `.proto` imports as text, as tsup.config.ts's loader does for the build. */
const protoAsText: Plugin = {
  name: 'proto-as-text',
  transform(code, id) {
    return id.endsWith('.proto') ? { code: `export default ${JSON.stringify(code)};`, map: null } : null;
  },
};

export default defineConfig({
  plugins: [protoAsText],
  test: {
    include: ['test/**/*.test.ts', 'src/**/*.test.ts'],
    testTimeout: 60_000,
    hookTimeout: 60_000,
    // The JSON report is what .ci/run counts; the default reporter is for people.
    reporters: ['default', ['json', { outputFile: '.vitest-report.json' }]],
    pool: 'forks',
  },
});
