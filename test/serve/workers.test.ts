import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { availableParallelism, tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { denseStackDoc, seededRows } from '../../src/bench/models.js';
import { RuntimeFailure } from '../../src/errors.js';
import { writeModelFile } from '../../src/format/index.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { createRequestHandler, startServer, workerCount, type RunningServer } from '../../src/serve/http.js';
import { openModel, type TendonModel } from '../../src/tendon.js';
import { workerScript } from '../throughput/worker-script.js';
import { postJson, sleep } from './helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-workers-'));
const WIDTHS = [20, 64, 32, 5];
const docA = denseStackDoc(WIDTHS, 31, 'relu', 'softmax');
const docB = denseStackDoc(WIDTHS, 32, 'relu', 'softmax');
/** A first feature of exactly this value makes the poisoned worker script exit (see below). */
const POISON = 777;

let script: string;
let poisoned: string;
let a: TendonModel;
let b: TendonModel;
let aPath: string;
let bPath: string;

beforeAll(async () => {
  script = workerScript();
  // The real worker, its message listener wrapped so a poisoned batch ends the thread: each send
  // of that batch kills its worker, as a crash on particular rows would.
  poisoned = join(dirname(script), `worker-poisoned-${process.pid}.mjs`);
  writeFileSync(
    poisoned,
    [
      `import { parentPort } from 'node:worker_threads';`,
      `const on = parentPort.on.bind(parentPort);`,
      `parentPort.on = (event, listener) => on(event, event !== 'message' ? listener : (m) => {`,
      `  if (m.kind === 'run' && new Float32Array(m.data)[0] === ${POISON}) process.exit(71);`,
      `  listener(m);`,
      `});`,
      `await import(${JSON.stringify(pathToFileURL(script).href)});`,
      '',
    ].join('\n'),
  );
  aPath = join(dir, 'a.tendon');
  bPath = join(dir, 'b.tendon');
  await writeModelFile(aPath, docA);
  await writeModelFile(bPath, docB);
  a = await openModel(aPath);
  b = await openModel(bPath);
});

afterAll(() => {
  a.dispose();
  b.dispose();
  rmSync(dir, { recursive: true, force: true });
  rmSync(poisoned, { force: true });
});

/** One seeded row of WIDTHS[0] features as plain numbers (what a client sends). */
const rowOf = (seed: number): number[] => Array.from(seededRows(1, WIDTHS[0], seed));

/** OS threads of this process (Linux): each worker thread is one, so it counts workers from outside. */
function osThreads(): number {
  const m = readFileSync('/proc/self/status', 'utf8').match(/^Threads:\s+(\d+)$/m);
  if (!m) throw new Error('no Threads line in /proc/self/status');
  return Number(m[1]);
}

async function served(path: string, workers: number, extra: { workerScript?: string } = {}): Promise<RunningServer> {
  return startServer({
    modelPath: path,
    port: 0,
    workers,
    workerScript: extra.workerScript ?? script,
    log: () => undefined,
    batcher: { maxWaitMs: 1, maxBatchRows: 16 },
  });
}

async function until(check: () => boolean, ms = 3000): Promise<boolean> {
  const end = Date.now() + ms;
  while (!check() && Date.now() < end) await sleep(10);
  return check();
}

describe('serving on worker threads', () => {
  it('the main thread chose the fast engine, whose rows do not depend on their batch company (what equality relies on)', () => {
    expect(a.engine).toBe('fast');
  });

  it('200 concurrent single-row requests: N=2 answers equal N=1 answers bit for bit, and agree with the float64 reference (float32 tolerance, common practice)', async () => {
    const one = await served(aPath, 1);
    const two = await served(aPath, 2);
    try {
      expect(one.handler.liveWorkers).toBe(0);
      expect(two.handler.liveWorkers).toBe(2);
      const rows = Array.from({ length: 200 }, (_, i) => rowOf(1000 + i));
      const [single, pooled] = await Promise.all([one, two].map((s) => Promise.all(rows.map((row) => postJson(`${s.url}/v1/score`, { rows: [row] })))));
      for (let i = 0; i < rows.length; i++) {
        expect(single![i]!.status).toBe(200);
        expect(pooled![i]!.status).toBe(200);
        expect(pooled![i]!.json.outputs).toEqual(single![i]!.json.outputs);
        expect(pooled![i]!.json.model).toBe(a.checksum);
      }
      const ref = referenceForward(docA, toMat64(Float32Array.from(rows.flat()), rows.length, WIDTHS[0])).y.data;
      let worst = 0;
      pooled!.forEach((answer, r) =>
        (answer.json.outputs[0] as number[]).forEach((v, j) => (worst = Math.max(worst, Math.abs(v - ref[r * WIDTHS.at(-1)! + j]!)))),
      );
      expect(worst).toBeLessThan(1e-5);
    } finally {
      await Promise.all([one.close(), two.close()]);
    }
  });

  it("hot swap under load with N=2 drops no request; every answer is exactly the old or the new model's; old pools close", async () => {
    const path = join(dir, 'swapping.tendon');
    await writeModelFile(path, docA);
    const running = await served(path, 2);
    const byChecksum = new Map([
      [a.checksum, a],
      [b.checksum, b],
    ]);
    try {
      let swapping = true;
      const swapper = (async () => {
        for (let i = 0; i < 6; i++) {
          await sleep(20);
          await writeModelFile(path, i % 2 === 0 ? docB : docA);
          const outcome = await running.handler.reload();
          expect(outcome.swapped).toBe(true);
        }
        swapping = false;
      })();
      const seen = new Set<string>();
      let answered = 0;
      const clients = Array.from({ length: 8 }, async (_, client) => {
        let n = 0;
        while (swapping || n < 5) {
          const row = rowOf(5000 + client * 1000 + n);
          const answer = await postJson(`${running.url}/v1/score`, { rows: [row] });
          expect(answer.status).toBe(200);
          const from = byChecksum.get(answer.json.model);
          expect(from, `answer from unknown model ${answer.json.model}`).toBeDefined();
          expect(answer.json.outputs).toEqual(from!.run([row]));
          seen.add(answer.json.model);
          answered++;
          n++;
        }
      });
      await Promise.all([swapper, ...clients]);
      expect(seen).toEqual(new Set([a.checksum, b.checksum]));
      expect(answered).toBeGreaterThanOrEqual(40);
      // Each swapped-out model's pool closes once its last batch is done: only the current 2 remain.
      expect(await until(() => running.handler.liveWorkers === 2)).toBe(true);
    } finally {
      await running.close();
    }
  });

  it('a bad new file, or one of other widths, is refused and the old pool keeps serving', async () => {
    const path = join(dir, 'refuse.tendon');
    await writeModelFile(path, docA);
    const running = await served(path, 2);
    try {
      writeFileSync(path, Buffer.from('not a model file at all'));
      const bad = await running.handler.reload();
      expect(bad.swapped).toBe(false);
      await writeModelFile(path, denseStackDoc([21, 8, 5], 3));
      const wider = await running.handler.reload();
      expect(wider).toEqual({ swapped: false, reason: expect.stringMatching(/takes 21 inputs/) });
      const row = rowOf(77);
      const answer = await postJson(`${running.url}/v1/score`, { rows: [row] });
      expect(answer.status).toBe(200);
      expect(answer.json.model).toBe(a.checksum);
      expect(answer.json.outputs).toEqual(a.run([row]));
      expect(running.handler.liveWorkers).toBe(2);
    } finally {
      await running.close();
    }
  });

  it('a batch whose worker dies twice is answered 500 with one line; the endpoint keeps serving on replaced workers', async () => {
    const running = await served(aPath, 2, { workerScript: poisoned });
    try {
      const poison = rowOf(9);
      poison[0] = POISON;
      const failed = await postJson(`${running.url}/v1/score`, { rows: [poison] });
      expect(failed.status).toBe(500);
      expect(failed.json.error.message).toMatch(/not scored: .*failed twice, each time because the worker thread died \(exit code 71\)/);
      expect(failed.json.error.message).not.toMatch(/\n/);
      const rows = Array.from({ length: 20 }, (_, i) => rowOf(300 + i));
      const answers = await Promise.all(rows.map((row) => postJson(`${running.url}/v1/score`, { rows: [row] })));
      answers.forEach((answer, i) => {
        expect(answer.status).toBe(200);
        expect(answer.json.outputs).toEqual(a.run([rows[i]!]));
      });
      expect(await until(() => running.handler.liveWorkers === 2)).toBe(true);
    } finally {
      await running.close();
    }
  });

  it.runIf(existsSync('/proc/self/status'))(
    'graceful shutdown answers what is in flight and ends every worker thread (counted by the OS, /proc/self/status)',
    async () => {
      const before = osThreads();
      const running = await served(aPath, 2);
      expect(osThreads()).toBeGreaterThanOrEqual(before + 2);
      const rows = Array.from({ length: 40 }, (_, i) => rowOf(600 + i));
      const inFlight = rows.map((row) => postJson(`${running.url}/v1/score`, { rows: [row] }).catch(() => null));
      await sleep(5);
      await running.close();
      const answers = await Promise.all(inFlight);
      for (const [i, answer] of answers.entries()) {
        if (answer === null) continue;
        expect([200, 503]).toContain(answer.status);
        if (answer.status === 200) expect(answer.json.outputs).toEqual(a.run([rows[i]!]));
      }
      expect(running.handler.liveWorkers).toBe(0);
      expect(osThreads()).toBeLessThanOrEqual(before);
    },
  );

  it('a worker script that cannot start fails `ready` and keeps no thread', async () => {
    const handler = createRequestHandler({ model: aPath, workers: 2, workerScript: join(dir, 'missing-worker.js'), log: () => undefined });
    await expect(handler.ready).rejects.toBeInstanceOf(RuntimeFailure);
    expect(handler.liveWorkers).toBe(0);
    await handler.close();
  });

  it("workers: 0 and 'auto' mean one per core (os.availableParallelism, Node docs); a bad count and runBatch with workers are refused", () => {
    expect(workerCount(undefined)).toBe(1);
    expect(workerCount(0)).toBe(availableParallelism());
    expect(workerCount('auto')).toBe(availableParallelism());
    expect(workerCount(3)).toBe(3);
    expect(() => workerCount(-1)).toThrow(/whole number >= 0, got -1/);
    expect(() => workerCount(1.5)).toThrow(RuntimeFailure);
    expect(() => createRequestHandler({ model: a, workers: 2, runBatch: (m, x, rows) => m.run(x, rows) })).toThrow(
      /runBatch cannot be combined with workers = 2/,
    );
  });
});

describe('a calibrated model on worker threads', () => {
  it('each worker applies the stored temperature: pooled answers equal the main thread and softmax(z / T) of the float64 reference', async () => {
    // Temperature scaling (Guo, Pleiss, Sun and Weinberger 2017): probabilities = softmax(z / T).
    const path = join(dir, 'calibrated.tendon');
    await writeModelFile(path, { ...docA, temperature: 2.5 });
    const one = await served(path, 1);
    const two = await served(path, 2);
    try {
      const rows = Array.from({ length: 8 }, (_, i) => rowOf(3000 + i));
      const single = await postJson(`${one.url}/v1/score`, { rows });
      const pooled = await postJson(`${two.url}/v1/score`, { rows });
      expect(pooled.json.outputs).toEqual(single.json.outputs);
      const ref = referenceForward({ ...docA, temperature: 2.5 }, toMat64(Float64Array.from(rows.flat()), rows.length, WIDTHS[0])).y.data;
      const raw = referenceForward(docA, toMat64(Float64Array.from(rows.flat()), rows.length, WIDTHS[0])).y.data;
      let movedApart = 0;
      rows.forEach((_, r) => {
        (pooled.json.outputs[r] as number[]).forEach((p, k) => {
          expect(Math.abs(p - ref[r * 5 + k])).toBeLessThan(1e-5);
          movedApart = Math.max(movedApart, Math.abs(p - raw[r * 5 + k]));
        });
      });
      expect(movedApart).toBeGreaterThan(1e-3); // the temperature changed the probabilities
    } finally {
      await one.close();
      await two.close();
    }
  });
});
