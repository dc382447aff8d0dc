/**
 * Where the pool tests find the built worker: dist/worker.js, as `npm test` builds it first.
 * When the tests run straight from sources (npx vitest run test/throughput) and dist has no
 * worker yet, the worker entry is bundled once into node_modules/.cache with esbuild.
 */
import { execFileSync } from 'node:child_process';
import { existsSync, mkdirSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '../..');

export function workerScript(): string {
  const built = join(root, 'dist', 'worker.js');
  if (existsSync(built) && !process.env.TENDON_TEST_REBUNDLE_WORKER) return built;
  const cached = join(root, 'node_modules', '.cache', 'tendon-test', 'worker.js');
  mkdirSync(dirname(cached), { recursive: true });
  execFileSync(
    join(root, 'node_modules', '.bin', 'esbuild'),
    ['src/engine/worker-entry.ts', '--bundle', '--platform=node', '--format=esm', '--target=node20', '--packages=external', `--outfile=${cached}`, '--log-level=warning'],
    { cwd: root },
  );
  return cached;
}
