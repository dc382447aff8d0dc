import { defineConfig } from 'tsup';

// The library ships as ESM + CJS with declarations; the CLI and the worker entry are ESM only.
// `.proto` imports load as text: formats/tendon.proto is embedded, never copied by hand.
const loader = { '.proto': 'text' } as const;

export default defineConfig([
  {
    entry: { index: 'src/index.ts' },
    format: ['esm', 'cjs'],
    dts: true,
    sourcemap: true,
    clean: true,
    loader,
    target: 'node20',
    // import.meta.url in the CommonJS build (model/tfjs-lazy.ts resolves tfjs-core from it).
    shims: true,
  },
  {
    entry: { cli: 'src/cli/bin.ts', worker: 'src/engine/worker-entry.ts', 'parse-worker': 'src/serve/parse-worker.ts' },
    format: ['esm'],
    sourcemap: true,
    target: 'node20',
    banner: { js: '#!/usr/bin/env node' },
    loader,
  },
]);
