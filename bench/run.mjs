// The fixed benchmark suite: `npm run bench` (builds first) or `node bench/run.mjs [--quick]`.
// Runs against the built package in dist/; prints a table and adds one dated row per
// configuration to the suite table in bench/RESULTS.md.
import { existsSync, readFileSync, writeFileSync, mkdirSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { dirname, join } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';

const here = dirname(fileURLToPath(import.meta.url));
const root = join(here, '..');
const quick = process.argv.includes('--quick');
const json = process.argv.includes('--json');

async function loadSuite() {
  const dist = join(root, 'dist', 'index.js');
  if (!existsSync(dist)) throw new Error('dist/index.js is missing: run `npm run build` (npm run bench does it for you)');
  const api = await import(pathToFileURL(dist).href);
  if (typeof api.runBenchSuite === 'function') return { api, from: 'dist/index.js' };
  // dist does not export the suite (src/index.ts without the bench re-exports): bundle it alone.
  const out = join(root, 'node_modules', '.cache', 'tendon-bench', 'suite.js');
  mkdirSync(dirname(out), { recursive: true });
  execFileSync(
    join(root, 'node_modules', '.bin', 'esbuild'),
    [
      'src/bench/index.ts',
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
  return { api: await import(pathToFileURL(out).href), from: 'src/bench (bundled; dist/index.js does not export runBenchSuite)' };
}

const { api, from } = await loadSuite();
const started = Date.now();
const result = await api.runBenchSuite({
  quick,
  numpyScript: join(here, 'numpy_baseline.py'),
  workerScript: join(root, 'dist', 'worker.js'),
  cliScript: join(root, 'dist', 'cli.js'),
  numpyScoreScript: join(here, 'numpy_score.py'),
  log: (line) => process.stderr.write(`  ${line}\n`),
});
const minutes = (Date.now() - started) / 60000;

if (json) process.stdout.write(JSON.stringify(result, null, 2) + '\n');
else {
  console.log(api.formatSuite(result));
  console.log(`\nsuite from ${from}; ${quick ? 'quick' : 'full'} run took ${minutes.toFixed(1)} min`);
}

const results = join(here, 'RESULTS.md');
// Insert the rows at the end of the suite's table wherever it sits (other scripts keep their own
// sections in the same file, before or after it); create the file or the section when missing.
const text = existsSync(results) ? readFileSync(results, 'utf8') : '# Benchmark results\n';
const lines = text.split('\n');
const isSuiteHeader = (l) => l.startsWith('| date (UTC) | machine | node | section');
let at = lines.findIndex(isSuiteHeader);
if (at < 0) {
  while (lines.length && lines.at(-1) === '') lines.pop();
  lines.push(
    '',
    '## suite (`npm run bench`)',
    '',
    'One row per configuration per run, newest last. Ratios ("x ...") are our rows/s over the baseline\'s, measured in the same run.',
    '',
    ...api.RESULTS_HEADER,
  );
  at = lines.length - 2;
}
while (at < lines.length && lines[at].startsWith('|')) at++;
lines.splice(at, 0, ...api.resultsMarkdownRows(result, new Date()));
writeFileSync(results, lines.join('\n').replace(/\n*$/, '\n'));
console.log(`added ${result.rows.length} rows to the suite table in bench/RESULTS.md`);
