import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { WorkerPool } from '../../src/serve/pool.js';
import { TfjsRunner, useEngine } from '../../src/engine/index.js';
import { encodeModel } from '../../src/format/index.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { ModelFileError, RuntimeFailure } from '../../src/errors.js';
import { denseStackDoc, seededRows } from '../../src/bench/models.js';
import { workerScript } from './worker-script.js';

const doc = denseStackDoc([20, 64, 32, 5], 11, 'relu', 'softmax');
let script: string;
let session: TfjsRunner;

beforeAll(async () => {
  script = workerScript();
  await useEngine('js');
  session = new TfjsRunner(doc);
});

afterAll(() => session.dispose());

describe('WorkerPool', () => {
  it('keeps row order across workers and matches one in-process js session exactly', async () => {
    const pool = await WorkerPool.open(doc, { size: 2, engine: 'js', workerScript: script, minShareRows: 8 });
    try {
      expect(pool.engine).toBe('js');
      // 103 rows: uneven shares (52 + 51), so an off-by-one in the split shows.
      const rows = 103;
      const x = seededRows(rows, doc.inputs, 5);
      const pooled = await pool.run(x, rows);
      const single = session.run(x, rows);
      expect(pooled.length).toBe(rows * 5);
      expect(Array.from(pooled)).toEqual(Array.from(single));
      // And against the float64 reference path (softmax rows, float32 tolerance; common practice).
      const ref = referenceForward(doc, toMat64(x, rows, doc.inputs)).y.data;
      let worst = 0;
      for (let i = 0; i < ref.length; i++) worst = Math.max(worst, Math.abs(ref[i]! - pooled[i]!));
      expect(worst).toBeLessThan(1e-5);
      // The caller's input is not transferred away.
      expect(x.length).toBe(rows * doc.inputs);
    } finally {
      await pool.close();
    }
  });

  it('on the wasm engine, pooled rows agree with the float64 reference (float32 tolerance, common practice)', async () => {
    const pool = await WorkerPool.open(doc, { size: 2, engine: 'wasm', workerScript: script, minShareRows: 8 });
    try {
      expect(pool.engine).toBe('wasm');
      const rows = 50;
      const x = seededRows(rows, doc.inputs, 21);
      const pooled = await pool.run(x, rows);
      const ref = referenceForward(doc, toMat64(x, rows, doc.inputs)).y.data;
      for (let i = 0; i < ref.length; i++) expect(Math.abs(ref[i]! - pooled[i]!)).toBeLessThan(1e-5);
    } finally {
      await pool.close();
    }
  });

  it('with the fast engine (own SIMD kernel), pooled rows agree with the float64 reference (float32 tolerance, common practice)', async () => {
    const pool = await WorkerPool.open(doc, { size: 2, engine: 'fast', workerScript: script, minShareRows: 8 });
    try {
      expect(pool.engine).toBe('fast');
      const rows = 37;
      const x = seededRows(rows, doc.inputs, 22);
      const pooled = await pool.run(x, rows);
      const ref = referenceForward(doc, toMat64(x, rows, doc.inputs)).y.data;
      for (let i = 0; i < ref.length; i++) expect(Math.abs(ref[i]! - pooled[i]!)).toBeLessThan(1e-5);
    } finally {
      await pool.close();
    }
  });

  it('answers concurrent calls each with its own rows', async () => {
    const pool = await WorkerPool.open(encodeModel(doc), { size: 2, engine: 'js', workerScript: script, minShareRows: 4 });
    try {
      const inputs = [1, 7, 40, 3].map((rows, i) => ({ rows, x: seededRows(rows, doc.inputs, 100 + i) }));
      const answers = await Promise.all(inputs.map(({ x, rows }) => pool.run(x, rows)));
      answers.forEach((y, i) => expect(Array.from(y)).toEqual(Array.from(session.run(inputs[i]!.x, inputs[i]!.rows))));
    } finally {
      await pool.close();
    }
  });

  it('replaces a worker killed mid-call and retries its rows; the call still succeeds', async () => {
    const pool = await WorkerPool.open(doc, { size: 2, engine: 'js', workerScript: script, minShareRows: 8 });
    try {
      pool.crashWorkerOnNextRun(0);
      const rows = 64;
      const x = seededRows(rows, doc.inputs, 9);
      const y = await pool.run(x, rows);
      expect(pool.replacements).toBe(1);
      expect(Array.from(y)).toEqual(Array.from(session.run(x, rows)));
      expect(pool.liveWorkers).toBe(2);
      // The replacement serves later calls.
      const again = await pool.run(x, rows);
      expect(Array.from(again)).toEqual(Array.from(y));
    } finally {
      await pool.close();
    }
  });

  it('fails the call with a clear RuntimeFailure when the retry dies too', async () => {
    const pool = await WorkerPool.open(doc, { size: 2, engine: 'js', workerScript: script, crashEveryRun: true });
    try {
      const x = seededRows(4, doc.inputs, 3);
      const failure = await pool.run(x, 4).then(
        () => null,
        (error: unknown) => error,
      );
      expect(failure).toBeInstanceOf(RuntimeFailure);
      expect(String((failure as Error).message)).toMatch(/rows 0\.\.3 failed twice, each time because the worker thread died \(exit code 70\)/);
    } finally {
      await pool.close();
    }
  });

  it('close() ends every worker thread and refuses new calls', async () => {
    const pool = await WorkerPool.open(doc, { size: 2, engine: 'js', workerScript: script });
    expect(pool.liveWorkers).toBe(2);
    const x = seededRows(2, doc.inputs, 1);
    const inFlight = pool.run(x, 2);
    await pool.close();
    // The call in flight when close() began still completes.
    expect((await inFlight).length).toBe(10);
    expect(pool.liveWorkers).toBe(0);
    await expect(pool.run(x, 2)).rejects.toBeInstanceOf(RuntimeFailure);
  });

  it('refuses bytes that are not a model with a ModelFileError before starting workers', async () => {
    await expect(WorkerPool.open(Uint8Array.of(1, 2, 3, 4), { size: 1, workerScript: script, source: 'bad.bin' })).rejects.toBeInstanceOf(ModelFileError);
  });
});
