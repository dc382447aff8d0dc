// Soak: concurrent clients against `tendon serve` on loopback for a bounded time (JSON, NPY and
// CSV clients mixed), then the wire comparison (bench/wire.mjs: the same load generator against
// a bare hand-written server and tendon serve with JSON and NPY), with a hot
// swap (a re-packed model written over the served file) and a fine-tune in the background whose
// output is renamed over the served file when it finishes. Prints (and with --record appends to
// bench/RESULTS.md): requests, rows, errors (must be 0), p50/p99 latency, server memory, swaps.
//
//   npm run soak                     # 60 s
//   npm run soak -- --seconds 300 --clients 16
//   npm run soak -- --seconds 20 --wire-seconds 3 --wire-rounds 3   (--no-wire skips the comparison)
//   npm run soak -- --seconds 30 --workers 2 --no-wire   (batches on worker threads, bodies on parse threads)
//   npm run soak -- --record           (append the figures to bench/RESULTS.md; without it, print only)
//
// Stops by itself: after --seconds, or --max-requests answers, whichever comes first; a hard
// deadline of seconds + 120 s (plus the wire comparison's budget) ends the process whatever happens.
import { spawn } from 'node:child_process';
import { mkdtemp, readFile, rename, rm, writeFile } from 'node:fs/promises';
import { cpus, tmpdir } from 'node:os';
import { join } from 'node:path';
import { CLI, HERE, RESULTS, hardDeadline, npyBody, option, seeded, startChild } from './shared.mjs';

const SECONDS = option('soak', 'seconds', 60);
const CLIENTS = option('soak', 'clients', 8);
const MAX_REQUESTS = option('soak', 'max-requests', 2_000_000);
const WORKERS = option('soak', 'workers', 1);
const RECORD = process.argv.includes('--record');
const WIRE_SECONDS = option('soak', 'wire-seconds', 4);
const WIRE_ROUNDS = option('soak', 'wire-rounds', 3);
hardDeadline('soak', (SECONDS + 120 + (process.argv.includes('--no-wire') ? 0 : WIRE_SECONDS * WIRE_ROUNDS * 3 + 240)) * 1000);

function run(args, { quiet = true } = {}) {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, [CLI, ...args], { stdio: ['ignore', 'pipe', 'pipe'] });
    let err = '';
    child.stderr.on('data', (d) => (err += d));
    if (!quiet) child.stdout.pipe(process.stdout);
    child.on('exit', (code) => (code === 0 ? resolve() : reject(new Error(`tendon ${args[0]} exited ${code}: ${err.trim()}`))));
  });
}

/** Resident memory of a process in KiB: current (VmRSS) and peak (VmHWM), from /proc. */
async function memoryOf(pid) {
  try {
    const status = await readFile(`/proc/${pid}/status`, 'utf8');
    const kib = (key) => Number(new RegExp(`^${key}:\\s+(\\d+) kB`, 'm').exec(status)?.[1] ?? NaN);
    return { rss: kib('VmRSS'), peak: kib('VmHWM') };
  } catch {
    return { rss: NaN, peak: NaN };
  }
}

const quantile = (sorted, q) => (sorted.length === 0 ? NaN : sorted[Math.min(sorted.length - 1, Math.max(0, Math.ceil(q * sorted.length) - 1))]);
const mib = (kib) => (kib / 1024).toFixed(0);

const FEATURES = ['zone1_temp_c', 'zone2_temp_c', 'zone3_temp_c', 'humidity_pct', 'belt_speed_m_min', 'dough_mass_g', 'proof_time_min'];
const LABELS = ['under', 'good', 'over'];

async function main() {
  const dir = await mkdtemp(join(tmpdir(), 'tendon-soak-'));
  const model = join(dir, 'served.tendon');
  const spec = join(dir, 'spec.json');
  await writeFile(
    spec,
    JSON.stringify({
      inputs: FEATURES.length,
      features: FEATURES,
      labels: LABELS,
      layers: [
        { kind: 'dense', size: 32, activation: 'relu' },
        { kind: 'dense', size: 3, activation: 'softmax' },
      ],
    }),
  );
  await run(['pack', spec, '-o', model, '--seed', '7']);

  // Training rows for the background fine-tune: invented, seeded.
  const random = seeded(2024);
  const rowOf = (r) => FEATURES.map((_, k) => Number((r() * 4 - 2 + k * 0.1).toFixed(3)));
  const lines = [[...FEATURES, 'label'].join(',')];
  for (let i = 0; i < 20_000; i++) {
    const row = rowOf(random);
    const score = row[0] + row[3] - row[5];
    lines.push([...row, score < -0.7 ? 'under' : score > 0.7 ? 'over' : 'good'].join(','));
  }
  const data = join(dir, 'rows.csv');
  await writeFile(data, lines.join('\n') + '\n');

  const { child: server, url: served } = startChild([CLI, 'serve', model, '--port', '0', '--workers', String(WORKERS)], /on (http:\/\/127\.0\.0\.1:\d+)/);
  const url = await served;
  console.log(`soak: ${SECONDS} s, ${CLIENTS} clients against ${url} (pid ${server.pid}, --workers ${WORKERS})`);

  const started = performance.now();
  const deadline = started + SECONDS * 1000;
  const latencies = [];
  const errors = [];
  const checksums = new Map();
  let requests = 0;
  let rows = 0;
  const samples = [];
  const startMemory = await memoryOf(server.pid);
  const tensorsOf = async () => Number(/^tendon_engine_tensors (\d+)$/m.exec(await (await fetch(`${url}/v1/counters`)).text())?.[1] ?? NaN);
  const tensorsStart = await tensorsOf();
  const sampler = setInterval(async () => samples.push((await memoryOf(server.pid)).rss), 1000);

  // Each client speaks one body type: JSON, NPY (answered NPY) or CSV (answered CSV), mixed.
  const KINDS = ['json', 'npy', 'csv'];
  const request = (kind, rowsOf) => {
    if (kind === 'npy')
      return {
        headers: { 'content-type': 'application/x-npy', accept: 'application/x-npy' },
        body: npyBody(Float32Array.from(rowsOf.flat()), rowsOf.length, FEATURES.length),
      };
    if (kind === 'csv')
      return { headers: { 'content-type': 'text/csv', accept: 'text/csv' }, body: [FEATURES.join(','), ...rowsOf.map((r) => r.join(','))].join('\n') };
    return { headers: { 'content-type': 'application/json' }, body: JSON.stringify({ rows: rowsOf }) };
  };
  /** Outputs per row and the model that answered, from any answer type. */
  const answerOf = async (kind, res) => {
    if (kind === 'npy') {
      const bytes = Buffer.from(await res.arrayBuffer());
      const data = bytes.subarray(10 + bytes.readUInt16LE(8));
      const values = new Float32Array(data.buffer.slice(data.byteOffset, data.byteOffset + data.byteLength));
      return {
        model: res.headers.get('tendon-model'),
        outputs: Array.from({ length: values.length / 3 }, (_, r) => Array.from(values.subarray(r * 3, r * 3 + 3))),
        text: '',
      };
    }
    if (kind === 'csv') {
      const text = await res.text();
      const [header, ...lines] = text.trimEnd().split('\n');
      return { model: res.headers.get('tendon-model'), outputs: header === LABELS.join(',') ? lines.map((l) => l.split(',').map(Number)) : null, text };
    }
    const answer = await res.json();
    return { model: answer.model, outputs: answer.outputs, text: JSON.stringify(answer) };
  };

  const byKind = { json: 0, npy: 0, csv: 0 };
  async function client(seed) {
    const r = seeded(seed);
    const kind = KINDS[seed % KINDS.length];
    while (performance.now() < deadline && requests < MAX_REQUESTS) {
      const n = 1 + Math.floor(r() * 16);
      const { headers, body } = request(
        kind,
        Array.from({ length: n }, () => rowOf(r)),
      );
      const t0 = performance.now();
      try {
        const res = await fetch(`${url}/v1/score`, { method: 'POST', headers, body });
        const answer = await answerOf(kind, res);
        latencies.push(performance.now() - t0);
        requests++;
        const sane =
          res.status === 200 &&
          Array.isArray(answer.outputs) &&
          answer.outputs.length === n &&
          // Softmax rows sum to 1 (common practice); float32 rounding allows a little.
          answer.outputs.every((o) => o.length === 3 && o.every(Number.isFinite) && Math.abs(o[0] + o[1] + o[2] - 1) < 1e-5);
        if (!sane) errors.push(`${kind} ${res.status} ${answer.text.slice(0, 120)}`);
        else {
          rows += n;
          byKind[kind]++;
          checksums.set(answer.model, (checksums.get(answer.model) ?? 0) + 1);
        }
      } catch (error) {
        requests++;
        errors.push(`${kind} ${String(error)}`);
      }
    }
  }

  // Background: a fine-tune of the served model; its output is renamed over the served file.
  const tuned = join(dir, 'tuned.tendon');
  const tuning = run(['tune', model, '--data', data, '--target', 'label', '-o', tuned, '--epochs', '5', '--batch', '64', '--seed', '1'])
    .then(async () => {
      if (performance.now() < deadline) {
        await rename(tuned, model);
        return `fine-tune swapped in at ${((performance.now() - started) / 1000).toFixed(1)} s`;
      }
      return 'fine-tune finished after the run';
    })
    .catch((error) => `fine-tune failed: ${error.message}`);
  // Hot swap at a third of the run: re-pack with another seed straight over the served file.
  const swap = new Promise((resolve) => setTimeout(resolve, (SECONDS * 1000) / 3)).then(async () => {
    await run(['pack', spec, '-o', model, '--seed', '8']);
    return `re-packed model written over the served file at ${((performance.now() - started) / 1000).toFixed(1)} s`;
  });

  await Promise.all(Array.from({ length: CLIENTS }, (_, i) => client(100 + i)));
  const elapsed = (performance.now() - started) / 1000;
  clearInterval(sampler);
  const endMemory = await memoryOf(server.pid);
  const counters = await (await fetch(`${url}/v1/counters`)).text();
  const swaps = Number(/tendon_model_swaps_total\{outcome="swapped"\} (\d+)/.exec(counters)?.[1] ?? NaN);
  const refused = Number(/tendon_model_swaps_total\{outcome="refused"\} (\d+)/.exec(counters)?.[1] ?? NaN);
  const events = await Promise.all([swap, tuning]);
  // The old model is freed when its last batch ends; give the swap a moment to settle.
  await new Promise((resolve) => setTimeout(resolve, 500));
  const tensorsEnd = await tensorsOf();

  server.kill('SIGTERM');
  await new Promise((resolve) => server.once('exit', resolve));
  await rm(dir, { recursive: true, force: true });

  latencies.sort((a, b) => a - b);
  // Memory after warm-up (the first 10% of samples) against the end, to see growth.
  const warm = samples[Math.floor(samples.length / 10)] ?? startMemory.rss;
  const figures = {
    seconds: elapsed,
    clients: CLIENTS,
    requests,
    rows,
    errors: errors.length,
    p50: quantile(latencies, 0.5),
    p99: quantile(latencies, 0.99),
    rssStart: startMemory.rss,
    rssWarm: warm,
    rssEnd: endMemory.rss,
    rssPeak: endMemory.peak,
    swaps,
    refused,
    models: checksums.size,
  };
  const machine = `${cpus()[0]
    ?.model.replace(/\s+\d+-Core Processor$/, '')
    .replace(/\s+/g, ' ')
    .trim()}, ${cpus().length} cores`;
  const date = new Date().toISOString().slice(0, 16).replace('T', ' ');
  console.log(events.join('\n'));
  console.log(
    [
      `requests served   ${requests.toLocaleString('en-US')} (${rows.toLocaleString('en-US')} rows) in ${elapsed.toFixed(1)} s, ${(requests / elapsed).toFixed(0)} req/s`,
      `by body type      ${KINDS.map((k) => `${k} ${byKind[k]}`).join(', ')} requests answered right`,
      `errors            ${errors.length}${errors.length ? ` (first: ${errors[0]})` : ''}`,
      `latency           p50 ${figures.p50.toFixed(2)} ms, p99 ${figures.p99.toFixed(2)} ms`,
      `server memory     rss ${mib(figures.rssStart)} MiB at start, ${mib(figures.rssWarm)} MiB after warm-up, ${mib(figures.rssEnd)} MiB at end, peak ${mib(figures.rssPeak)} MiB`,
      `model swaps       ${swaps} swapped, ${refused} refused; answers came from ${checksums.size} models`,
      `tensor count      ${tensorsStart} at start, ${tensorsEnd} at end (one model resident each time)`,
    ].join('\n'),
  );

  if (RECORD) {
    await recordRow(
      `| ${date} | ${machine} | ${process.version} | ${elapsed.toFixed(0)} | ${CLIENTS} | ${requests} | ${rows} | ${errors.length} | ${figures.p50.toFixed(2)} | ${figures.p99.toFixed(2)} | ${mib(figures.rssStart)} | ${mib(figures.rssWarm)} | ${mib(figures.rssEnd)} | ${mib(figures.rssPeak)} | ${swaps} | ${checksums.size} | ${tensorsStart} | ${tensorsEnd} |`,
    );
    console.log(`added a row to the soak table in ${RESULTS}`);
  }
  let wireOk = true;
  if (!process.argv.includes('--no-wire')) {
    // The wire comparison, same load generator for every server (bench/wire.mjs); with --record it appends its own rows.
    console.log('\nwire: bare node:http server vs tendon serve (JSON, NPY), same load generator');
    wireOk = await new Promise((resolve) => {
      const child = spawn(
        process.execPath,
        [join(HERE, 'wire.mjs'), '--seconds', String(WIRE_SECONDS), '--rounds', String(WIRE_ROUNDS), ...(RECORD ? ['--record'] : [])],
        { stdio: 'inherit' },
      );
      child.once('exit', (code) => resolve(code === 0));
    });
  }
  process.exitCode = errors.length === 0 && tensorsEnd === tensorsStart && wireOk ? 0 : 1;
}

/**
 * Put a row at the end of the soak table in RESULTS.md. `npm run bench` appends its rows to the
 * end of the file, so the soak section sits before the suite's table, never after it.
 */
async function recordRow(row) {
  const lines = (await readFile(RESULTS, 'utf8').catch(() => '')).split('\n');
  if (!lines.includes('## soak')) {
    const section = [
      '## soak',
      '',
      'One row per `npm run soak`: concurrent clients against `tendon serve` on loopback, with a hot swap and a background fine-tune swapped in. Errors must be 0; rss should not grow after warm-up.',
      '',
      '| date (UTC) | machine | node | seconds | clients | requests | rows | errors | p50 ms | p99 ms | rss start MiB | rss warm MiB | rss end MiB | rss peak MiB | swaps | models | tensors start | tensors end |',
      '|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|',
      '',
    ];
    const suite = lines.findIndex((l) => l.startsWith('| date (UTC) | machine | node | section'));
    if (suite >= 0) lines.splice(suite, 0, ...section, '## suite (`npm run bench`)', '');
    else lines.push(...(lines.at(-1) === '' ? [] : ['']), ...section);
  }
  let at = lines.indexOf('## soak') + 1;
  while (at < lines.length && !lines[at].startsWith('|')) at++;
  while (at < lines.length && lines[at].startsWith('|')) at++;
  lines.splice(at, 0, row);
  await writeFile(RESULTS, lines.join('\n'));
}

main().catch((error) => {
  console.error(`soak: ${error.message}`);
  process.exit(1);
});
