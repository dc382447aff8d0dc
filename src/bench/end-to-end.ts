/**
 * End to end: `tendon score` of a float32 .npy (40,000 x 784 in the suite) on an i8-stored
 * 784-512-256-10 model, the whole process (start-up, reading, scoring on every core, writing),
 * against numpy doing the same job in python3 (bench/numpy_score.py: np.load, forward in batches
 * of 256 with the dequantised float32 weights, np.save), the whole process too, as a user's numpy
 * runs (`numpyEnv`), once on one OpenBLAS thread and once on its default (every core) per round,
 * as the suite's numpy baseline does: on a busy machine OpenBLAS's spinning threads can lose to
 * one thread, and the comparison is with numpy at its best. The jobs run in turn, alternating
 * which goes first, for several rounds; each side's best is compared, since a busy shared
 * machine only ever slows a run down.
 * The outputs are compared as well: a fast wrong answer would be no win.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { readModelFile, writeModelFile } from '../format/index.js';
import { decodeNpy, encodeNpy } from '../io/index.js';
import type { DenseLayer } from '../model/index.js';
import { numpyEnv } from './baselines.js';
import { denseStackDoc, seededRows } from './models.js';

export interface EndToEndOptions {
  /** The built CLI (dist/cli.js). */
  readonly cliScript: string;
  /** bench/numpy_score.py; numpy is left out (with a note) when python3 or numpy is missing. */
  readonly numpyScript: string;
  readonly widths: readonly number[];
  readonly rows: number;
  readonly rounds: number;
  readonly log: (line: string) => void;
}

export interface EndToEndResult {
  /** Wall seconds of each `tendon score` process, in round order. */
  readonly tendonSeconds: number[];
  /** Wall seconds of each numpy process (one OpenBLAS thread, then every core, per round); empty when numpy did not run (see `note`). */
  readonly numpySeconds: number[];
  /** The OpenBLAS threads of numpy's best run: '1' or 'all'. */
  readonly numpyBestThreads: string;
  /** numpy's best over tendon's best: above 1 when tendon is faster. NaN without numpy. */
  readonly vsNumpy: number;
  /** Rows whose largest output is at the same column in both answers (int8 against float32 weights). */
  readonly topClassAgreement: number;
  readonly maxAbsDiff: number;
  /** What `tendon score` said it ran on. */
  readonly tendonLine: string;
  readonly note: string | null;
}

/** Runs both jobs `rounds` times on one seeded input file; removes its files afterwards. */
export async function measureEndToEnd(opts: EndToEndOptions): Promise<EndToEndResult> {
  const dir = mkdtempSync(join(tmpdir(), 'tendon-bench-e2e-'));
  try {
    const job = await writeJobFiles(dir, opts.widths, opts.rows);
    const numpyProbe = spawnSync('python3', ['-c', 'import numpy'], { encoding: 'utf8' });
    const note = numpyProbe.status === 0 ? null : 'end-to-end numpy run skipped: python3 -c "import numpy" failed';
    const tendonSeconds: number[] = [];
    const numpySeconds: number[] = [];
    let tendonLine = '';
    const runTendon = (): void => {
      const t0 = performance.now();
      const child = spawnSync(process.execPath, [opts.cliScript, 'score', job.model, '--input', job.input, '--output', job.tendonOut], { encoding: 'utf8' });
      if (child.status !== 0) throw new Error(`end-to-end: tendon score failed: ${child.stderr.trim()}`);
      tendonSeconds.push((performance.now() - t0) / 1000);
      tendonLine = child.stderr.trim().split('\n').pop() ?? '';
    };
    const numpyThreads: string[] = [];
    const runNumpy = (): void => {
      for (const threads of ['1', null]) {
        const t0 = performance.now();
        const child = spawnSync('python3', [opts.numpyScript, job.numpyJob], { encoding: 'utf8', env: numpyEnv(threads) });
        if (child.status !== 0) throw new Error(`end-to-end: ${opts.numpyScript} failed: ${child.stderr.trim().split('\n').pop()}`);
        numpySeconds.push((performance.now() - t0) / 1000);
        numpyThreads.push(threads ?? 'all');
      }
    };
    for (let round = 0; round < opts.rounds; round++) {
      opts.log(`end to end: tendon score vs numpy, round ${round + 1} of ${opts.rounds}`);
      const order = round % 2 === 0 ? [runTendon, runNumpy] : [runNumpy, runTendon];
      for (const run of order) if (run === runTendon || note === null) run();
    }
    const numpyBest = Math.min(...numpySeconds);
    const vsNumpy = numpySeconds.length ? numpyBest / Math.min(...tendonSeconds) : Number.NaN;
    const numpyBestThreads = numpyThreads[numpySeconds.indexOf(numpyBest)] ?? '';
    const agreement = note === null ? compareOutputs(job.tendonOut, job.numpyOut) : { topClassAgreement: Number.NaN, maxAbsDiff: Number.NaN };
    return { tendonSeconds, numpySeconds, numpyBestThreads, vsNumpy, ...agreement, tendonLine, note };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

interface JobFiles {
  readonly model: string;
  readonly input: string;
  readonly tendonOut: string;
  readonly numpyOut: string;
  readonly numpyJob: string;
}

/** The i8 model, the seeded input, and numpy's job with the weights as the i8 file decodes them (float32). */
async function writeJobFiles(dir: string, widths: readonly number[], rows: number): Promise<JobFiles> {
  const files = {
    model: join(dir, 'model-i8.tendon'),
    input: join(dir, 'x.npy'),
    tendonOut: join(dir, 'tendon-out.npy'),
    numpyOut: join(dir, 'numpy-out.npy'),
    numpyJob: join(dir, 'numpy-job.json'),
  };
  writeFileSync(files.input, encodeNpy(seededRows(rows, widths[0], 11), [rows, widths[0]]));
  await writeModelFile(files.model, { ...denseStackDoc(widths, 7, 'relu', 'linear'), storage: 'i8' });
  const stored = (await readModelFile(files.model)).doc;
  const layers = stored.layers.filter((l): l is DenseLayer => l.kind === 'dense');
  const entries = layers.map((layer, i) => {
    const weight = join(dir, `w${i}.npy`);
    const bias = join(dir, `b${i}.npy`);
    writeFileSync(weight, encodeNpy(layer.weight, [i === 0 ? stored.inputs : layers[i - 1].size, layer.size]));
    writeFileSync(bias, encodeNpy(layer.bias, [layer.size]));
    return { weight, bias, relu: layer.activation === 'relu' };
  });
  writeFileSync(files.numpyJob, JSON.stringify({ input: files.input, output: files.numpyOut, batch: 256, layers: entries }));
  return files;
}

/** Top-class agreement and the largest difference between two rows x outputs float32 .npy files. */
function compareOutputs(a: string, b: string): { topClassAgreement: number; maxAbsDiff: number } {
  const x = decodeNpy(a, readFileSync(a));
  const y = decodeNpy(b, readFileSync(b));
  if (x.shape.join() !== y.shape.join()) throw new Error(`end-to-end: outputs differ in shape: (${x.shape}) vs (${y.shape})`);
  const [rows, cols] = x.shape;
  let same = 0;
  let maxAbsDiff = 0;
  for (let r = 0; r < rows; r++) {
    let bx = 0;
    let by = 0;
    for (let c = 0; c < cols; c++) {
      const i = r * cols + c;
      maxAbsDiff = Math.max(maxAbsDiff, Math.abs(x.data[i] - y.data[i]));
      if (x.data[i] > x.data[r * cols + bx]) bx = c;
      if (y.data[i] > y.data[r * cols + by]) by = c;
    }
    if (bx === by) same++;
  }
  return { topClassAgreement: same / rows, maxAbsDiff };
}
