import { execFileSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { writeModelFile } from '../../src/format/index.js';
import { SeededRng } from '../../src/model/index.js';
import { createRequestHandler, startServer, type ModelBatchRunner } from '../../src/serve/http.js';
import { ModelSlot } from '../../src/serve/swap.js';
import { openModel, type TendonModel } from '../../src/tendon.js';
import { bakeryDoc, docOf, randomDense } from '../fixtures/models.js';
import { call, postJson, sleep } from './helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-swap-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const LOAF = [214, 231, 219, 44, 1.6, 790, 56];

/** A runner that waits `ms` before running, so batches are in flight while the test acts. */
const slow =
  (ms: number): ModelBatchRunner =>
  async (m, x, rows) => {
    await sleep(ms);
    return m.run(x, rows);
  };

async function twoModels(name: string): Promise<{ path: string; a: TendonModel; b: TendonModel; aPath: string; bPath: string }> {
  const aPath = join(dir, `${name}-a.tendon`);
  const bPath = join(dir, `${name}-b.tendon`);
  await writeModelFile(aPath, bakeryDoc(1));
  await writeModelFile(bPath, bakeryDoc(2));
  const path = join(dir, `${name}.tendon`);
  await writeModelFile(path, bakeryDoc(1));
  return { path, aPath, bPath, a: await openModel(aPath), b: await openModel(bPath) };
}

describe('hot swap', () => {
  it("under concurrent load drops no request: every answer is 200 and exactly the old or the new model's", async () => {
    const { path, a, b } = await twoModels('load');
    const logs: string[] = [];
    const running = await startServer({ modelPath: path, port: 0, log: (l) => logs.push(l), batcher: { maxWaitMs: 1, maxBatchRows: 16 } });
    const byChecksum = new Map([
      [a.checksum, a],
      [b.checksum, b],
    ]);
    let swapping = true;
    const swapper = (async () => {
      for (let i = 0; i < 6; i++) {
        await sleep(15);
        await writeModelFile(path, i % 2 === 0 ? b.doc : a.doc);
        const outcome = await running.handler.reload();
        expect(outcome.swapped).toBe(true);
      }
      swapping = false;
    })();
    const seen = new Set<string>();
    const clients = Array.from({ length: 8 }, async (_, client) => {
      let n = 0;
      while (swapping || n < 5) {
        const row = LOAF.map((v, c) => v + (c === 5 ? client * 10 + n : 0));
        const answer = await postJson(`${running.url}/v1/score`, { rows: [row] });
        expect(answer.status).toBe(200);
        const from = byChecksum.get(answer.json.model);
        expect(from, `answer from unknown model ${answer.json.model}`).toBeDefined();
        expect(answer.json.outputs).toEqual(from!.run([row]));
        seen.add(answer.json.model);
        n++;
      }
      return n;
    });
    const counts = await Promise.all(clients);
    await swapper;
    expect(counts.reduce((s, n) => s + n, 0)).toBeGreaterThan(40);
    expect(seen).toEqual(new Set([a.checksum, b.checksum]));
    expect(logs.filter((l) => l.includes('swapped in'))).toHaveLength(6);
    await running.close();
    a.dispose();
    b.dispose();
  });

  it('a request in flight finishes on the old model; the next one gets the new model', async () => {
    const { path, a, b, bPath } = await twoModels('inflight');
    const running = await startServer({ modelPath: path, port: 0, runBatch: slow(150), log: () => undefined });
    const inFlight = postJson(`${running.url}/v1/score`, { rows: [LOAF] });
    await sleep(50);
    const outcome = await running.handler.reload(bPath);
    expect(outcome).toMatchObject({ swapped: true, checksum: b.checksum, generation: 2 });
    const old = await inFlight;
    expect(old.json.model).toBe(a.checksum);
    expect(old.json.outputs).toEqual(a.run([LOAF]));
    const next = await postJson(`${running.url}/v1/score`, { rows: [LOAF] });
    expect(next.json.model).toBe(b.checksum);
    expect(next.json.outputs).toEqual(b.run([LOAF]));
    await running.close();
    a.dispose();
    b.dispose();
  });

  it('a bad new file is refused with one log line and the old model keeps serving; so is one of other widths', async () => {
    const { path, a } = await twoModels('bad');
    const logs: string[] = [];
    const running = await startServer({ modelPath: path, port: 0, log: (l) => logs.push(l) });
    writeFileSync(path, Buffer.from('not a model at all, just some bytes'));
    const outcome = await running.handler.reload();
    expect(outcome.swapped).toBe(false);
    expect(logs).toHaveLength(1);
    expect(logs[0]).toMatch(/^tendon serve: kept the current model; refused .*bad\.tendon: /);
    const still = await postJson(`${running.url}/v1/score`, { rows: [LOAF] });
    expect(still.status).toBe(200);
    expect(still.json.model).toBe(a.checksum);
    const rng = new SeededRng(1);
    await writeModelFile(path, docOf(5, [randomDense(rng, 5, 3, 'softmax')]));
    const widths = await running.handler.reload();
    expect(widths).toMatchObject({ swapped: false });
    expect(logs[1]).toMatch(/it takes 5 inputs and gives 3 outputs; the model being served takes 7 and gives 3/);
    expect((await postJson(`${running.url}/v1/score`, { rows: [LOAF] })).json.outputs).toEqual(a.run([LOAF]));
    const counters = (await call(`${running.url}/v1/counters`)).text;
    expect(counters).toMatch(/^tendon_model_swaps_total\{outcome="refused"\} 2$/m);
    await running.close();
    a.dispose();
  });

  it('the old model is disposed only after the last batch holding it ends', async () => {
    const { path, bPath } = await twoModels('dispose');
    const first = await openModel(path);
    const slot = new ModelSlot(first, path, { log: () => undefined });
    const lease = slot.acquire();
    expect((await slot.reload(bPath)).swapped).toBe(true);
    // Still leased: the batch that started on it can finish.
    expect(lease.model.run([LOAF])[0]).toHaveLength(3);
    expect(slot.current).not.toBe(first);
    slot.release(lease);
    expect(() => first.run([LOAF])).toThrow();
    await slot.close();
    expect(() => slot.current.run([LOAF])).toThrow();
  });

  it('replacing the watched file swaps the model in without a call', async () => {
    const { path, b } = await twoModels('watch');
    const running = await startServer({ modelPath: path, port: 0, watch: { debounceMs: 50 }, log: () => undefined });
    await writeModelFile(path, b.doc);
    let model = '';
    for (let i = 0; i < 100 && model !== b.checksum; i++) {
      await sleep(30);
      model = (await postJson(`${running.url}/v1/score`, { rows: [LOAF] })).json.model;
    }
    expect(model).toBe(b.checksum);
    await running.close();
    b.dispose();
  });
});

describe('load shedding and shutdown', () => {
  it('a full queue answers 503 with Retry-After', async () => {
    const { path, a } = await twoModels('busy');
    const running = await startServer({
      modelPath: path,
      port: 0,
      runBatch: slow(200),
      batcher: { maxQueueRows: 2, maxBatchRows: 1, maxWaitMs: 0 },
      retryAfterSeconds: 2,
      log: () => undefined,
    });
    const answers = await Promise.all(Array.from({ length: 6 }, () => postJson(`${running.url}/v1/score`, { rows: [LOAF] })));
    const statuses = answers.map((x) => x.status).sort();
    // One batch runs, two rows wait; the rest find the queue full.
    expect(statuses.filter((s) => s === 200).length).toBeGreaterThanOrEqual(3);
    const busy = answers.filter((x) => x.status === 503);
    expect(busy.length).toBeGreaterThanOrEqual(1);
    for (const x of busy) {
      expect(x.headers.get('retry-after')).toBe('2');
      expect(x.json.error.message).toMatch(/^busy: \d+ rows queued, 1 more would pass the limit of 2/);
    }
    await running.close();
    a.dispose();
  });

  it('graceful close: stops accepting, answers every queued request, then refuses connections', async () => {
    const { path, a } = await twoModels('close');
    const running = await startServer({ modelPath: path, port: 0, runBatch: slow(100), batcher: { maxBatchRows: 1, maxWaitMs: 0 }, log: () => undefined });
    const queued = Array.from({ length: 4 }, () => postJson(`${running.url}/v1/score`, { rows: [LOAF] }));
    await sleep(40);
    const closing = running.close();
    const answers = await Promise.all(queued);
    expect(answers.map((x) => x.status)).toEqual([200, 200, 200, 200]);
    for (const x of answers) expect(x.json.outputs).toEqual(a.run([LOAF]));
    await closing;
    await expect(fetch(`${running.url}/v1/alive`)).rejects.toThrow();
    a.dispose();
  });

  it('an embedded handler under a prefix answers only there; not ready before loading, 503 after close', async () => {
    const { path, a } = await twoModels('prefix');
    // The model is read from a named pipe, so it stays "loading" until the test writes the bytes.
    const pipe = join(dir, 'prefix-pipe.tendon');
    execFileSync('mkfifo', [pipe]);
    const handler = createRequestHandler({ model: pipe, prefix: '/ml/', log: () => undefined });
    const { createServer } = await import('node:http');
    const server = createServer((req, res) => (req.url?.startsWith('/ml/') ? handler(req, res) : res.end('own route')));
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    const port = (server.address() as { port: number }).port;
    let early: Awaited<ReturnType<typeof call>>;
    try {
      early = await call(`http://127.0.0.1:${port}/ml/v1/ready`);
    } finally {
      await writeFile(pipe, readFileSync(path));
    }
    expect(early.status).toBe(503);
    expect(early.json).toEqual({ ready: false, reason: 'the model is still loading' });
    await handler.ready;
    expect((await call(`http://127.0.0.1:${port}/ml/v1/ready`)).status).toBe(200);
    const scored = await postJson(`http://127.0.0.1:${port}/ml/v1/score`, { rows: [LOAF] });
    expect(scored.json.outputs).toEqual(a.run([LOAF]));
    expect((await call(`http://127.0.0.1:${port}/other`)).text).toBe('own route');
    expect((await call(`http://127.0.0.1:${port}/ml/v1/nothing`)).status).toBe(404);
    await handler.close();
    const after = await postJson(`http://127.0.0.1:${port}/ml/v1/score`, { rows: [LOAF] });
    expect(after.status).toBe(503);
    expect(after.json.error.message).toMatch(/shutting down/);
    expect((await call(`http://127.0.0.1:${port}/ml/v1/ready`)).status).toBe(503);
    await new Promise((r) => server.close(r));
    a.dispose();
  });
});
