/**
 * The worker script the pool tests start: the worker entry bundled from the current sources with
 * esbuild (external packages), once per test process, into node_modules/.cache. Bundling here
 * rather than using dist/worker.js keeps the tests on today's sources and safe from another
 * build rewriting dist/ while they run. TENDON_TEST_WORKER=dist uses dist/worker.js instead
 * (after `npm run build`), to test the shipped file.
 */
import { execFileSync } from 'node:child_process';
import { existsSync, mkdirSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '../..');
const bundles = new Map<string, string>();

/**
 * `entry` bundled from the sources once per test process, with the same options as the build
 * (--loader:.proto=text as in tsup.config.ts: the schema is embedded from formats/tendon.proto).
 */
function bundledFromSources(entry: string, name: string): string {
  const done = bundles.get(entry);
  if (done) return done;
  const out = join(root, 'node_modules', '.cache', 'tendon-test', `${name}-${process.pid}.js`);
  mkdirSync(dirname(out), { recursive: true });
  execFileSync(
    join(root, 'node_modules', '.bin', 'esbuild'),
    [
      entry,
      '--bundle',
      '--platform=node',
      '--format=esm',
      '--target=node20',
      '--packages=external',
      '--loader:.proto=text',
      `--outfile=${out}`,
      '--log-level=warning',
    ],
    { cwd: root },
  );
  bundles.set(entry, out);
  return out;
}

export function workerScript(): string {
  if (process.env.TENDON_TEST_WORKER === 'dist') {
    const built = join(root, 'dist', 'worker.js');
    if (!existsSync(built)) throw new Error('TENDON_TEST_WORKER=dist but dist/worker.js is missing: run `npm run build` first');
    return built;
  }
  return bundledFromSources('src/engine/worker-entry.ts', 'worker');
}

/** The parse thread script, bundled from the sources like the worker entry (or dist/parse-worker.js with TENDON_TEST_WORKER=dist). */
export function parseWorkerScript(): string {
  if (process.env.TENDON_TEST_WORKER === 'dist') return join(root, 'dist', 'parse-worker.js');
  return bundledFromSources('src/serve/parse-worker.ts', 'parse-worker');
}
