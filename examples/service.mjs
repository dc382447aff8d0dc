// A small service that ships a model next to its own routes.
//
//   npm run build && node examples/service.mjs [PORT]
//
// - GET  /               the service's own route
// - GET  /orders/today   another route of its own
// - /ml/v1/...           tendon's endpoint, mounted under /ml (score, about, alive, ready, counters)
// - POST /admin/refresh  fine-tune the model on fresh rows in the background; the result is swapped
//                        in only if it beats the current model on held-out rows
//
// The data are invented and seeded (an oven line: seven sensors predict under / good / over).
import { mkdtempSync } from 'node:fs';
import { createServer } from 'node:http';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { buildFromSpec, createRequestHandler, openModel, SeededRng, tune, writeModelFile } from '../dist/index.js';

const FEATURES = ['zone1_temp_c', 'zone2_temp_c', 'zone3_temp_c', 'humidity_pct', 'belt_speed_m_min', 'dough_mass_g', 'proof_time_min'];

/** `rows` invented loaves; `offset` shifts the zone thermometers (a second site reading high). */
function loaves(rows, seed, offset = 0) {
  // tendon's own seeded generator, so every run invents the same loaves.
  const rng = new SeededRng(seed);
  const normal = () => rng.normal();
  const x = new Float32Array(rows * 7);
  const y = new Int32Array(rows);
  for (let r = 0; r < rows; r++) {
    const z1 = 215 + 9 * normal(),
      z2 = 230 + 9 * normal(),
      z3 = 220 + 9 * normal();
    const humidity = 45 + 8 * normal(),
      belt = 1.6 + 0.12 * normal(),
      mass = 800 + 45 * normal(),
      proof = 55 + 7 * normal();
    const degree =
      (0.5 * (z1 - 215) + 0.8 * (z2 - 230) + 0.6 * (z3 - 220)) / 9 - 8 * (belt - 1.6) - (mass - 800) / 60 - (humidity - 45) / 10 + (proof - 55) / 14;
    y[r] = degree < -1 ? 0 : degree > 1 ? 2 : 1;
    x.set([z1 + offset, z2 + offset, z3 + offset, humidity, belt, mass, proof], r * 7);
  }
  return { x, y, rows };
}

function accuracy(model, data) {
  const out = model.run(data.x, data.rows);
  let right = 0;
  for (let r = 0; r < data.rows; r++) {
    const row = out.subarray(r * 3, r * 3 + 3);
    if (row.indexOf(Math.max(...row)) === data.y[r]) right++;
  }
  return right / data.rows;
}

/** Start the service; resolves with its URL and a stop function. */
export async function startService({ port = 0, dir = mkdtempSync(join(tmpdir(), 'tendon-service-')), log = console.log } = {}) {
  const modelPath = join(dir, 'bakery.tendon');
  const spec = {
    inputs: 7,
    features: FEATURES,
    labels: ['under', 'good', 'over'],
    normalise: { method: 'zscore' },
    layers: [
      { kind: 'dense', size: 32, activation: 'relu' },
      { kind: 'dropout', rate: 0.1 },
      { kind: 'dense', size: 3, activation: 'softmax' },
    ],
  };
  const first = await tune(await buildFromSpec(spec, 'bakery-spec.json', { seed: 7 }), loaves(1500, 1), { epochs: 15, seed: 1 });
  await writeModelFile(modelPath, first.doc);

  const ml = createRequestHandler({ model: modelPath, prefix: '/ml', log });
  await ml.ready;
  let refreshing = null;

  /** Fine-tune on fresh rows from the second site; swap in only if it beats the current model on held-out rows. */
  async function refresh() {
    const fresh = loaves(1200, 2, 9);
    const heldOut = loaves(400, 3, 9);
    const current = ml.model;
    const tuned = await tune(current.doc, fresh, { epochs: 10, seed: 2, lr: 0.003, normalisation: 'continue' });
    const candidatePath = join(dir, 'candidate.tendon');
    await writeModelFile(candidatePath, tuned.doc);
    const candidate = await openModel(candidatePath);
    const before = accuracy(current, heldOut);
    const after = accuracy(candidate, heldOut);
    candidate.dispose();
    if (after <= before) return { swapped: false, before, after };
    await writeModelFile(modelPath, tuned.doc); // atomic: a reader sees the old file or the new one
    const outcome = await ml.reload();
    return { swapped: outcome.swapped, before, after };
  }

  const server = createServer((req, res) => {
    const path = (req.url ?? '/').split('?')[0];
    if (path.startsWith('/ml/')) return ml(req, res);
    const json = (status, value) => {
      res.writeHead(status, { 'content-type': 'application/json' });
      res.end(JSON.stringify(value) + '\n');
    };
    if (req.method === 'GET' && path === '/') return json(200, { service: 'oven line', model: ml.model?.checksum });
    if (req.method === 'GET' && path === '/orders/today') return json(200, { orders: 42 });
    if (req.method === 'POST' && path === '/admin/refresh') {
      refreshing ??= refresh().finally(() => (refreshing = null));
      refreshing.then(
        (r) => log(`refresh: held-out accuracy ${r.before.toFixed(3)} -> ${r.after.toFixed(3)}; ${r.swapped ? 'swapped in' : 'kept the current model'}`),
        (e) => log(`refresh failed: ${e.message}`),
      );
      return json(202, { started: true });
    }
    json(404, { error: 'no such route' });
  });
  await new Promise((resolve) => server.listen(port, '127.0.0.1', resolve));
  const url = `http://127.0.0.1:${server.address().port}`;
  return {
    url,
    /** Wait for a refresh under way (tests and scripts). */
    refreshed: () => refreshing ?? Promise.resolve(null),
    async stop() {
      await new Promise((resolve) => {
        server.close(resolve);
        server.closeIdleConnections();
      });
      await ml.close();
    },
  };
}

if (import.meta.url === `file://${process.argv[1]}`) {
  const service = await startService({ port: Number(process.argv[2] ?? 8408) });
  console.log(`oven-line service on ${service.url}; the model answers under ${service.url}/ml/v1/score`);
  const stop = async () => {
    await service.stop();
    process.exit(0);
  };
  process.on('SIGTERM', stop);
  process.on('SIGINT', stop);
}
