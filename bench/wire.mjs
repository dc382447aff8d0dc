// Serving at wire speed: one load generator, in one run, against the bare hand-written server
// around model.run (bench/bare-server.mjs, JSON) and `tendon serve` with JSON and with NPY
// bodies. Rounds rotate the order, so a busy machine hurts every server alike; the ratios to
// the bare server's JSON rows/s in the same round are the figures that count.
//
//   node bench/wire.mjs [--seconds 4] [--rounds 2] [--clients 8] [--rows 16] [--workers 2]
//
// Prints a table and appends rows to the wire table in bench/RESULTS.md. Loopback only; every
// phase stops after --seconds, and a hard deadline ends the process whatever happens.
import { execFileSync } from 'node:child_process';
import { Agent, request } from 'node:http';
import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import { cpus, tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { CLI, HERE, RESULTS, hardDeadline, option, seeded, startChild } from './shared.mjs';

const SECONDS = option('wire', 'seconds', 4);
const ROUNDS = option('wire', 'rounds', 2);
const CLIENTS = option('wire', 'clients', 8);
const ROWS = option('wire', 'rows', 16);
const WORKERS = option('wire', 'workers', 2);
const INPUTS = 784;
hardDeadline('wire', (SECONDS * ROUNDS * 4 + 180) * 1000);

/** The CPU's vector features that matter to the kernels, from /proc/cpuinfo (Linux). */
export async function vectorFeatures() {
  const info = await readFile('/proc/cpuinfo', 'utf8').catch(() => '');
  const flags = new Set((/^flags\s*:\s*(.*)$/m.exec(info)?.[1] ?? '').split(/\s+/));
  if (flags.size <= 1) return 'unknown';
  return ['avx2', 'avx512f'].map((f) => `${f} ${flags.has(f) ? 'yes' : 'no'}`).join(', ');
}

/** One request over the keep-alive agent: status and the whole answer. */
function send(agent, url, body, headers) {
  return new Promise((resolve, reject) => {
    const req = request(`${url}/v1/score`, { method: 'POST', agent, headers: { ...headers, 'content-length': String(body.length) } }, (res) => {
      const parts = [];
      res.on('data', (d) => parts.push(d));
      res.on('end', () => resolve({ status: res.statusCode, body: Buffer.concat(parts), type: res.headers['content-type'] ?? '' }));
      res.on('error', reject);
    });
    req.on('error', reject);
    req.end(body);
  });
}

/** CLIENTS loops sending `body` for SECONDS; rows/s and errors. */
async function load(url, body, headers) {
  const agent = new Agent({ keepAlive: true, maxSockets: CLIENTS });
  const deadline = performance.now() + SECONDS * 1000;
  let requests = 0;
  let errors = 0;
  let firstError = '';
  const started = performance.now();
  await Promise.all(
    Array.from({ length: CLIENTS }, async () => {
      while (performance.now() < deadline) {
        try {
          const res = await send(agent, url, body, headers);
          if (res.status === 200) requests++;
          else {
            errors++;
            firstError ||= `${res.status} ${res.body.toString('utf8').slice(0, 120)}`;
          }
        } catch (error) {
          errors++;
          firstError ||= String(error);
        }
      }
    }),
  );
  const seconds = (performance.now() - started) / 1000;
  agent.destroy();
  return { rowsPerSecond: (requests * ROWS) / seconds, requests, errors, firstError };
}

function npyBody(x, rows) {
  const dict = `{'descr': '<f4', 'fortran_order': False, 'shape': (${rows}, ${INPUTS}), }`;
  const total = Math.ceil((10 + dict.length + 1) / 64) * 64;
  const head = Buffer.alloc(total, 0x20);
  Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]).copy(head);
  head.writeUInt16LE(total - 10, 8);
  head.write(dict, 10, 'latin1');
  head[total - 1] = 0x0a;
  return Buffer.concat([head, Buffer.from(x.buffer)]);
}

function npyValues(buffer) {
  const headerLength = buffer.readUInt16LE(8);
  const data = buffer.subarray(10 + headerLength);
  return new Float32Array(data.buffer.slice(data.byteOffset, data.byteOffset + data.byteLength));
}

export async function measureWire() {
  const dir = await mkdtemp(join(tmpdir(), 'tendon-wire-'));
  const spec = join(dir, 'spec.json');
  const model = join(dir, 'mnist-shaped.tendon');
  await writeFile(
    spec,
    JSON.stringify({
      inputs: INPUTS,
      layers: [
        { kind: 'dense', size: 512, activation: 'relu' },
        { kind: 'dense', size: 256, activation: 'relu' },
        { kind: 'dense', size: 10, activation: 'softmax' },
      ],
    }),
  );
  execFileSync(process.execPath, [CLI, 'pack', spec, '-o', model, '--seed', '11'], { stdio: 'ignore' });

  // Pixel-like rows, three decimals: what a client would send as JSON.
  const random = seeded(5);
  const rows = Array.from({ length: ROWS }, () => Array.from({ length: INPUTS }, () => Math.round(random() * 1000) / 1000));
  const jsonBody = Buffer.from(JSON.stringify({ rows }));
  const npy = npyBody(Float32Array.from(rows.flat()), ROWS);

  const bare = startChild([join(HERE, 'bare-server.mjs'), model], /on (http:\/\/127\.0\.0\.1:\d+)/);
  const tendon = startChild(
    [CLI, 'serve', model, '--port', '0', '--workers', String(WORKERS), '--batch-rows', '128', '--no-watch'],
    /on (http:\/\/127\.0\.0\.1:\d+)/,
  );
  try {
    const urls = { bare: await bare.url, tendon: await tendon.url };
    const JSON_HEADERS = { 'content-type': 'application/json' };
    const NPY_HEADERS = { 'content-type': 'application/x-npy', accept: 'application/x-npy' };

    // The answers agree before anything is timed: NPY against JSON, both against the bare server.
    const agent = new Agent({ keepAlive: true });
    const viaJson = JSON.parse((await send(agent, urls.tendon, jsonBody, JSON_HEADERS)).body).outputs.flat();
    const viaBare = JSON.parse((await send(agent, urls.bare, jsonBody, JSON_HEADERS)).body).outputs.flat();
    const viaNpy = npyValues((await send(agent, urls.tendon, npy, NPY_HEADERS)).body);
    agent.destroy();
    let worst = 0;
    for (let i = 0; i < viaJson.length; i++) worst = Math.max(worst, Math.abs(viaNpy[i] - viaJson[i]), Math.abs(viaBare[i] - viaJson[i]));
    if (viaNpy.length !== viaJson.length || !(worst <= 1e-6))
      throw new Error(`answers differ: NPY ${viaNpy.length} values, JSON ${viaJson.length}, worst difference ${worst}`);

    const targets = [
      { server: 'bare node:http', body: 'JSON', url: urls.bare, payload: jsonBody, headers: JSON_HEADERS },
      { server: `tendon serve --workers ${WORKERS}`, body: 'JSON', url: urls.tendon, payload: jsonBody, headers: JSON_HEADERS },
      { server: `tendon serve --workers ${WORKERS}`, body: 'NPY', url: urls.tendon, payload: npy, headers: NPY_HEADERS },
    ];
    const results = [];
    for (let round = 1; round <= ROUNDS; round++) {
      const order = targets.map((_, i) => targets[(i + round - 1) % targets.length]);
      const measured = new Map();
      for (const t of order) {
        const r = await load(t.url, t.payload, t.headers);
        measured.set(t, r);
        console.error(`  round ${round}: ${t.server} ${t.body}: ${r.rowsPerSecond.toFixed(0)} rows/s, ${r.errors} errors`);
      }
      const baseline = measured.get(targets[0]).rowsPerSecond;
      for (const t of targets) results.push({ round, server: t.server, body: t.body, ...measured.get(t), ratio: measured.get(t).rowsPerSecond / baseline });
    }
    return { results, worst };
  } finally {
    bare.child.kill('SIGTERM');
    tendon.child.kill('SIGTERM');
    await Promise.all([bare.child, tendon.child].map((c) => (c.exitCode !== null ? null : new Promise((resolve) => c.once('exit', resolve)))));
    await rm(dir, { recursive: true, force: true });
  }
}

async function recordRows(rows) {
  const lines = (await readFile(RESULTS, 'utf8').catch(() => '# Benchmark results\n')).split('\n');
  if (!lines.includes('## wire')) {
    const section = [
      '## wire',
      '',
      'One load generator, one run: the bare hand-written node:http server around model.run (JSON) against `tendon serve` with JSON and NPY bodies; model 784-512-256-10, keep-alive clients, rows per request as shown. "x bare" is rows/s over the bare server\'s JSON rows/s in the same round. Targets: tendon JSON >= 1.0x, tendon NPY >= 3x.',
      '',
      '| date (UTC) | machine | vector | node | round | server | body | clients | rows/req | rows/s | x bare | errors |',
      '|---|---|---|---|---|---|---|---|---|---|---|---|',
      '',
    ];
    // Before the suite's section, which `npm run bench` keeps appending to.
    const suite = lines.findIndex((l) => l.startsWith('## suite'));
    if (suite >= 0) lines.splice(suite, 0, ...section);
    else lines.push(...(lines.at(-1) === '' ? [] : ['']), ...section);
  }
  let at = lines.indexOf('## wire') + 1;
  while (at < lines.length && !lines[at].startsWith('|')) at++;
  while (at < lines.length && lines[at].startsWith('|')) at++;
  lines.splice(at, 0, ...rows);
  await writeFile(RESULTS, lines.join('\n'));
}

if (process.argv[1] === fileURLToPath(import.meta.url)) {
  try {
    const { results, worst } = await measureWire();
    const machine = `${cpus()[0]
      ?.model.replace(/\s+\d+-Core Processor$/, '')
      .replace(/\s+/g, ' ')
      .trim()}, ${cpus().length} cores`;
    const vector = await vectorFeatures();
    const date = new Date().toISOString().slice(0, 16).replace('T', ' ');
    console.log(`answers: NPY and bare JSON within ${worst.toExponential(1)} of tendon JSON (limit 1e-6); CPU: ${vector}`);
    console.log('round | server | body | rows/s | x bare | errors');
    for (const r of results)
      console.log(
        `${r.round} | ${r.server} | ${r.body} | ${r.rowsPerSecond.toFixed(0)} | ${r.ratio.toFixed(2)} | ${r.errors}${r.firstError ? ` (${r.firstError})` : ''}`,
      );
    await recordRows(
      results.map(
        (r) =>
          `| ${date} | ${machine} | ${vector} | ${process.version} | ${r.round} | ${r.server} | ${r.body} | ${CLIENTS} | ${ROWS} | ${Math.round(r.rowsPerSecond).toLocaleString('en-US')} | ${r.ratio.toFixed(2)} | ${r.errors} |`,
      ),
    );
    console.log(`added ${results.length} rows to the wire table in ${RESULTS}`);
    process.exitCode = results.every((r) => r.errors === 0) ? 0 : 1;
  } catch (error) {
    console.error(`wire: ${error.message}`);
    process.exit(1);
  }
}
