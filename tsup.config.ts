import { defineConfig } from 'tsup';

// The library ships as ESM + CJS with declarations; the CLI and the worker entry are ESM only.
export default defineConfig([
  {
    entry: { index: 'src/index.ts' },
    format: ['esm', 'cjs'],
    dts: true,
    sourcemap: true,
    clean: true,
    target: 'node20',
  },
  {
    entry: { cli: 'src/cli/bin.ts', worker: 'src/engine/worker-entry.ts', 'parse-worker': 'src/serve/parse-worker.ts' },
    format: ['esm'],
    sourcemap: true,
    target: 'node20',
    banner: { js: '#!/usr/bin/env node' },
  },
]);
