// Serving at wire speed: one load generator, in one run, against the bare hand-written server
// around model.run (bench/bare-server.mjs, JSON) and `tendon serve` with JSON and with NPY
// bodies. Rounds rotate the order, so a busy machine hurts every server alike; the ratios to
// the bare server's JSON rows/s in the same round are the figures that count.
//
//   node bench/wire.mjs [--seconds 4] [--rounds 3] [--clients 8] [--rows 16] [--workers 2] [--record]
//                       [--only bare|json|npy] [--serve-args "--wait-ms 1"] [--profile DIR]
//
// Prints a table (rows/s, ratio to the bare server, p50/p99 latency) and, with --record, appends
// rows to the wire table in bench/RESULTS.md. --profile DIR runs the servers under node
// --cpu-prof and leaves the profiles in DIR. Loopback only; every phase stops after --seconds,
// and a hard deadline ends the process whatever happens.
import { execFileSync } from 'node:child_process';
import { Agent, request } from 'node:http';
import { connect } from 'node:net';
import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import { cpus, tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { CLI, HERE, RESULTS, hardDeadline, npyBody, option, seeded, startChild } from './shared.mjs';

const SECONDS = option('wire', 'seconds', 4);
const ROUNDS = option('wire', 'rounds', 3);
const CLIENTS = option('wire', 'clients', 8);
const ROWS = option('wire', 'rows', 16);
const WORKERS = option('wire', 'workers', 2);
const INPUTS = 784;
function text(name) {
  const i = process.argv.indexOf(`--${name}`);
  return i < 0 ? null : (process.argv[i + 1] ?? '');
}
const ONLY = text('only');
const SERVE_ARGS = (text('serve-args') ?? '').split(/\s+/).filter(Boolean);
const PROFILE = text('profile');
const profiled = (args) => (PROFILE ? ['--cpu-prof', '--cpu-prof-dir', PROFILE, ...args] : args);
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

/**
 * The whole request, encoded once: request line, headers and body in one buffer, so a client
 * only writes bytes (no header objects, no agent, no per-request encoding).
 */
function encodeRequest(url, body, headers) {
  const { host } = new URL(url);
  const lines = [`POST /v1/score HTTP/1.1`, `host: ${host}`, ...Object.entries(headers).map(([k, v]) => `${k}: ${v}`), `content-length: ${body.length}`];
  return Buffer.concat([Buffer.from(lines.join('\r\n') + '\r\n\r\n', 'latin1'), body]);
}

const HEAD_END = Buffer.from('\r\n\r\n');
const CHUNKED_END = Buffer.from('\r\n0\r\n\r\n');

/**
 * One keep-alive connection that sends `request` again as soon as an answer is whole, until
 * `deadline`. It reads an answer's status and length only: Content-Length, or the last chunk's
 * marker for a chunked answer. The load generator shares the cores with the servers, so it does
 * as little as it can per request.
 */
function rawClient(port, host, request, deadline, tally) {
  return new Promise((resolve) => {
    const socket = connect(port, host);
    socket.setNoDelay(true);
    let head = null; // bytes of an answer's head read so far (rarely more than one chunk)
    let remaining = -1; // body bytes still to come; -1 while reading the head, -2 for chunked
    let tail = Buffer.alloc(0); // the last bytes of a chunked answer
    let status = 0;
    let errorText = '';
    let sentAt = 0;
    const fire = () => {
      sentAt = performance.now();
      socket.write(request);
    };
    const answered = () => {
      tally.latencies.push(performance.now() - sentAt);
      if (status === 200) tally.requests++;
      else {
        tally.errors++;
        tally.firstError ||= `${status} ${errorText.slice(0, 120)}`;
      }
      head = null;
      remaining = -1;
      if (performance.now() < deadline) fire();
      else socket.end();
    };
    const onBody = (chunk) => {
      if (status !== 200 && errorText.length < 120) errorText += chunk.toString('latin1');
      if (remaining >= 0) {
        remaining -= chunk.length;
        if (remaining <= 0) answered();
      } else {
        tail = Buffer.concat([tail, chunk]).subarray(-CHUNKED_END.length);
        if (tail.equals(CHUNKED_END)) answered();
      }
    };
    socket.on('connect', fire);
    socket.on('data', (chunk) => {
      if (remaining !== -1) return onBody(chunk);
      head = head ? Buffer.concat([head, chunk]) : chunk;
      const end = head.indexOf(HEAD_END);
      if (end < 0) return;
      const text = head.toString('latin1', 0, end);
      status = Number(text.slice(9, 12));
      errorText = '';
      const length = /\r\ncontent-length:\s*(\d+)/i.exec(text);
      remaining = length ? Number(length[1]) : -2;
      tail = Buffer.alloc(0);
      const rest = head.subarray(end + HEAD_END.length);
      if (rest.length > 0 || remaining === 0) onBody(rest);
    });
    socket.on('error', (error) => {
      tally.errors++;
      tally.firstError ||= String(error);
    });
    socket.on('close', resolve);
  });
}

/** CPU seconds a process has used (user + system, every thread), from /proc; NaN elsewhere. */
async function cpuSeconds(pid) {
  const stat = await readFile(`/proc/${pid}/stat`, 'utf8').catch(() => '');
  const fields = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
  return fields.length > 13 ? (Number(fields[11]) + Number(fields[12])) / 100 : NaN;
}

/** CLIENTS connections sending `body` for SECONDS; rows/s, latency quantiles and errors. */
async function load(url, body, headers, pid) {
  const { hostname, port } = new URL(url);
  const cpuBefore = await cpuSeconds(pid);
  const request = encodeRequest(url, body, headers);
  const tally = { requests: 0, errors: 0, firstError: '', latencies: [] };
  const started = performance.now();
  const deadline = started + SECONDS * 1000;
  await Promise.all(Array.from({ length: CLIENTS }, () => rawClient(Number(port), hostname, request, deadline, tally)));
  const seconds = (performance.now() - started) / 1000;
  const cpu = (await cpuSeconds(pid)) - cpuBefore;
  const sorted = Float64Array.from(tally.latencies).sort();
  const quantile = (q) => sorted[Math.min(sorted.length - 1, Math.max(0, Math.ceil(q * sorted.length) - 1))] ?? NaN;
  return {
    rowsPerSecond: (tally.requests * ROWS) / seconds,
    requests: tally.requests,
    errors: tally.errors,
    firstError: tally.firstError,
    p50: quantile(0.5),
    p99: quantile(0.99),
    cpuMsPerRequest: (cpu * 1000) / tally.requests,
  };
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
  const npy = npyBody(Float32Array.from(rows.flat()), ROWS, INPUTS);

  const bare = startChild(profiled([join(HERE, 'bare-server.mjs'), model]), /on (http:\/\/127\.0\.0\.1:\d+)/);
  const tendon = startChild(
    profiled([CLI, 'serve', model, '--port', '0', '--workers', String(WORKERS), '--batch-rows', '128', '--no-watch', ...SERVE_ARGS]),
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
      { name: 'bare', server: 'bare node:http', body: 'JSON', pid: bare.child.pid, url: urls.bare, payload: jsonBody, headers: JSON_HEADERS },
      {
        name: 'json',
        server: `tendon serve --workers ${WORKERS}`,
        body: 'JSON',
        pid: tendon.child.pid,
        url: urls.tendon,
        payload: jsonBody,
        headers: JSON_HEADERS,
      },
      { name: 'npy', server: `tendon serve --workers ${WORKERS}`, body: 'NPY', pid: tendon.child.pid, url: urls.tendon, payload: npy, headers: NPY_HEADERS },
    ].filter((t) => !ONLY || t.name === ONLY);
    const results = [];
    for (let round = 1; round <= ROUNDS; round++) {
      const order = targets.map((_, i) => targets[(i + round - 1) % targets.length]);
      const measured = new Map();
      for (const t of order) {
        const r = await load(t.url, t.payload, t.headers, t.pid);
        measured.set(t, r);
        console.error(
          `  round ${round}: ${t.server} ${t.body}: ${r.rowsPerSecond.toFixed(0)} rows/s, p50 ${r.p50.toFixed(2)} ms, p99 ${r.p99.toFixed(2)} ms, server CPU ${r.cpuMsPerRequest.toFixed(2)} ms/request, ${r.errors} errors`,
        );
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
    console.log('round | server | body | rows/s | x bare | p50 ms | p99 ms | server CPU ms/request | errors');
    for (const r of results)
      console.log(
        `${r.round} | ${r.server} | ${r.body} | ${r.rowsPerSecond.toFixed(0)} | ${r.ratio.toFixed(2)} | ${r.p50.toFixed(2)} | ${r.p99.toFixed(2)} | ${r.cpuMsPerRequest.toFixed(2)} | ${r.errors}${r.firstError ? ` (${r.firstError})` : ''}`,
      );
    // Medians over the rounds: one figure per server and body.
    const median = (values) => values.sort((a, b) => a - b)[Math.floor((values.length - 1) / 2)];
    for (const key of [...new Set(results.map((r) => `${r.server} | ${r.body}`))]) {
      const mine = results.filter((r) => `${r.server} | ${r.body}` === key);
      const pick = (f) => median(mine.map(f));
      console.log(
        `median | ${key} | ${pick((r) => r.rowsPerSecond).toFixed(0)} rows/s | x bare ${pick((r) => r.ratio).toFixed(2)} (${mine.map((r) => r.ratio.toFixed(2)).join(', ')}) | p50 ${pick((r) => r.p50).toFixed(2)} ms | p99 ${pick((r) => r.p99).toFixed(2)} ms | server CPU ${pick((r) => r.cpuMsPerRequest).toFixed(2)} ms/request`,
      );
    }
    if (process.argv.includes('--record')) {
      await recordRows(
        results.map(
          (r) =>
            `| ${date} | ${machine} | ${vector} | ${process.version} | ${r.round} | ${r.server} | ${r.body} | ${CLIENTS} | ${ROWS} | ${Math.round(r.rowsPerSecond).toLocaleString('en-US')} | ${r.ratio.toFixed(2)} | ${r.errors} |`,
        ),
      );
      console.log(`added ${results.length} rows to the wire table in ${RESULTS}`);
    }
    process.exitCode = results.every((r) => r.errors === 0) ? 0 : 1;
  } catch (error) {
    console.error(`wire: ${error.message}`);
    process.exit(1);
  }
}
