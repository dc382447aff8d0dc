/**
 * With worker threads, JSON and CSV bodies are parsed on parse threads: the answers and the
 * refusals (status and message) are those of the main-thread parser, and a parse thread that
 * dies fails only the request it held.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { BAKERY_FEATURES, bakeryDoc } from '../fixtures/models.js';
import { writeModelFile } from '../../src/format/index.js';
import { decodeNpy, encodeNpy } from '../../src/io/index.js';
import { startServer, type RunningServer } from '../../src/serve/http.js';
import { ParsePool } from '../../src/serve/parse-pool.js';
import { parseWorkerScript, workerScript } from '../throughput/worker-script.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-parse-threads-'));
let threaded: RunningServer;
let single: RunningServer;
const loaf = (i: number) => [214 + i, 231 - i, 219 + i / 2, 44 + i, 1.6 + i / 20, 790 + 10 * i, 56 - i];

beforeAll(async () => {
  const path = join(dir, 'bakery.tendon');
  await writeModelFile(path, bakeryDoc(7));
  const common = { modelPath: path, port: 0, watch: false, maxRowsPerRequest: 40, log: () => undefined };
  threaded = await startServer({ ...common, workers: 2, workerScript: workerScript(), parseWorkerScript: parseWorkerScript() });
  single = await startServer(common);
}, 60_000);

afterAll(async () => {
  await threaded.close();
  await single.close();
  rmSync(dir, { recursive: true, force: true });
});

const BODIES: [string, string, string][] = [
  ['JSON number rows', 'application/json', JSON.stringify({ rows: [loaf(0), loaf(1), loaf(2)] })],
  ['JSON rows keyed by feature', 'application/json', JSON.stringify({ rows: [Object.fromEntries(BAKERY_FEATURES.map((f, k) => [f, loaf(3)[k]]))] })],
  ['CSV with a header', 'text/csv', [BAKERY_FEATURES.join(','), loaf(4).join(',')].join('\n')],
  ['bad JSON', 'application/json', '{"rows": [[1, 2'],
  ['a wrong width', 'application/json', '{"rows": [[1, 2]]}'],
  ['an unknown feature', 'application/json', '{"rows": [{"oven": 1}]}'],
  ['too many rows', 'application/json', JSON.stringify({ rows: Array.from({ length: 41 }, () => loaf(0)) })],
  ['a bad CSV cell', 'text/csv', '1,2,3,4,5,6,x\n'],
];

describe('parse threads', () => {
  it.each(BODIES)('%s: the same status and body as without threads', async (_, type, body) => {
    const send = (s: RunningServer) => fetch(`${s.url}/v1/score`, { method: 'POST', headers: { 'content-type': type }, body });
    const [a, b] = await Promise.all([send(threaded), send(single)]);
    expect(a.status).toBe(b.status);
    expect(await a.text()).toBe(await b.text());
  });

  it('JSON, CSV and NPY requests at once, batched together on the threads: JSON answers as without threads, NPY and CSV within 1e-6 of them', async () => {
    // Long spellings (sevenths) make the JSON bodies pass 4 KiB, so they move to the parse threads uncopied.
    const rowsOf = (i: number) => Array.from({ length: 40 }, (_, r) => loaf(i + r).map((v) => v + 1 / 7));
    const post = (s: RunningServer, type: string, body: string | Uint8Array, accept = 'application/json') =>
      fetch(`${s.url}/v1/score`, { method: 'POST', headers: { 'content-type': type, accept }, body });
    const outputsOf = async (res: Response, kind: string): Promise<number[][]> => {
      expect(res.status).toBe(200);
      if (kind === 'npy') {
        const { shape, data } = decodeNpy('answer', Buffer.from(await res.arrayBuffer()));
        return Array.from({ length: shape[0]! }, (_, r) => Array.from(data.subarray(r * shape[1]!, (r + 1) * shape[1]!)));
      }
      if (kind === 'csv')
        return (await res.text())
          .trim()
          .split('\n')
          .slice(1)
          .map((line) => line.split(',').map(Number));
      return ((await res.json()) as { outputs: number[][] }).outputs;
    };
    const kinds = ['json', 'npy', 'csv'] as const;
    const sent = Array.from({ length: 12 }, (_, i) => {
      const rows = rowsOf(i);
      const kind = kinds[i % 3]!;
      const body = JSON.stringify({ rows });
      expect(body.length).toBeGreaterThan(4096);
      if (kind === 'npy')
        return { kind, rows, res: post(threaded, 'application/x-npy', encodeNpy(Float32Array.from(rows.flat()), [40, 7]), 'application/x-npy') };
      if (kind === 'csv') return { kind, rows, res: post(threaded, 'text/csv', rows.map((r) => r.join(',')).join('\n'), 'text/csv') };
      return { kind, rows, res: post(threaded, 'application/json', body) };
    });
    for (const { kind, rows, res } of sent) {
      const expected = await post(single, 'application/json', JSON.stringify({ rows }));
      const want = ((await expected.json()) as { outputs: number[][] }).outputs;
      const got = await outputsOf(await res, kind);
      expect(got.length).toBe(40);
      // CSV spells float32 values in their shortest form; JSON and NPY carry them whole.
      got.forEach((row, r) => row.forEach((v, c) => expect(Math.abs(v - want[r]![c]!)).toBeLessThanOrEqual(kind === 'json' ? 0 : 1e-6)));
    }
  });

  it('a parse thread that dies fails the request it held; the pool replaces it and parses on', async () => {
    const pool = new ParsePool(1, parseWorkerScript());
    try {
      const shape = { inputs: 7, features: null, maxRows: 10 };
      const ok = await pool.parse('json', Buffer.from(JSON.stringify({ rows: [loaf(0)] })), shape);
      expect(Array.from(ok.x)).toEqual(loaf(0).map(Math.fround));
      // End the only thread while it holds a request, as a crash would.
      const threads = (pool as unknown as { threads: { worker: import('node:worker_threads').Worker }[] }).threads;
      // A body large enough (200,000 rows) that the thread is still parsing it when it is ended:
      // a 10-row body can be answered before terminate() lands.
      const big = { ...shape, maxRows: 200_000 };
      const body = Buffer.from(JSON.stringify({ rows: Array.from({ length: 200_000 }, () => loaf(1)) }));
      const pending = pool.parse('json', body, big);
      await threads[0]!.worker.terminate();
      await expect(pending).rejects.toThrow(/a parse thread exited with code 1 while parsing this request/);
      const again = await pool.parse('csv', Buffer.from(loaf(2).join(',')), shape);
      expect(Array.from(again.x)).toEqual(loaf(2).map(Math.fround));
    } finally {
      await pool.close();
    }
  });
});
