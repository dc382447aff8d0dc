import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { liveTensorCount } from '../../src/engine/index.js';
import { writeModelFile } from '../../src/format/index.js';
import { startServer, type RunningServer } from '../../src/serve/http.js';
import { openModel, type TendonModel } from '../../src/tendon.js';
import { BAKERY_FEATURES, BAKERY_LABELS, bakeryDoc } from '../fixtures/models.js';
import { call, parseExposition, postJson, rawRequest } from './helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-http-'));
let running: RunningServer;
let model: TendonModel;
const logs: string[] = [];
const LOAVES = [
  [214, 231, 219, 44, 1.6, 790, 56],
  [230, 245, 236, 38, 1.45, 760, 64],
  [199, 214, 206, 52, 1.8, 850, 48],
];

beforeAll(async () => {
  const path = join(dir, 'bakery.tendon');
  await writeModelFile(path, bakeryDoc(7));
  running = await startServer({ modelPath: path, port: 0, bodyLimitBytes: 4096, log: (l) => logs.push(l) });
  model = await openModel(path);
});

afterAll(async () => {
  await running.close();
  model.dispose();
  rmSync(dir, { recursive: true, force: true });
});

const url = (p: string) => `${running.url}${p}`;

describe('the endpoint on loopback (a real HTTP client: fetch)', () => {
  it('listens on 127.0.0.1 on the free port it was given (port 0)', () => {
    expect(running.host).toBe('127.0.0.1');
    expect(running.port).toBeGreaterThan(0);
  });

  it('POST /v1/score with rows as arrays answers what model.run answers, with labels and the top class', async () => {
    const a = await postJson(url('/v1/score'), { rows: LOAVES });
    expect(a.status).toBe(200);
    expect(a.headers.get('content-type')).toMatch(/^application\/json/);
    const expected = model.run(LOAVES);
    expect(a.json.outputs).toEqual(expected);
    expect(a.json.model).toBe(model.checksum);
    expect(a.json.labels).toEqual(BAKERY_LABELS);
    const top = expected.map((row) => row.indexOf(Math.max(...row)));
    expect(a.json.top).toEqual(top);
    expect(a.json.topLabel).toEqual(top.map((i) => BAKERY_LABELS[i]));
  });

  it('rows as objects keyed by feature names (any key order) give the same answers', async () => {
    const rows = LOAVES.map((loaf) => Object.fromEntries(BAKERY_FEATURES.map((name, i) => [name, loaf[i]]).reverse()));
    const a = await postJson(url('/v1/score'), { rows });
    expect(a.status).toBe(200);
    expect(a.json.outputs).toEqual(model.run(LOAVES));
  });

  it('50 concurrent requests through the micro-batcher each get their own rows back', async () => {
    const rows = Array.from({ length: 50 }, (_, i) => LOAVES[i % 3].map((v, c) => v + (c === 0 ? i : 0)));
    const answers = await Promise.all(rows.map((row) => postJson(url('/v1/score'), { rows: [row] })));
    const expected = model.run(rows);
    answers.forEach((a, i) => {
      expect(a.status).toBe(200);
      expect(a.json.outputs).toEqual([expected[i]]);
    });
  });

  it('GET /v1/about gives the `tendon about` facts; /v1/alive and /v1/ready answer 200', async () => {
    const about = await call(url('/v1/about'));
    expect(about.status).toBe(200);
    expect(about.json).toMatchObject({ inputs: 7, outputs: 3, features: BAKERY_FEATURES, labels: BAKERY_LABELS, storage: 'f32' });
    expect(about.json.file.checksum).toBe(model.checksum);
    expect(about.json.layers.map((l: { kind: string }) => l.kind)).toEqual(['dense', 'dropout', 'dense']);
    expect((await call(url('/v1/alive'))).json).toEqual({ alive: true });
    expect((await call(url('/v1/ready'))).status).toBe(200);
  });

  it('GET /v1/counters parses as the Prometheus text exposition format and counts what was sent', async () => {
    await postJson(url('/v1/score'), { rows: LOAVES });
    await postJson(url('/v1/score'), { rows: 'nope' });
    const a = await call(url('/v1/counters'));
    expect(a.status).toBe(200);
    expect(a.headers.get('content-type')).toBe('text/plain; version=0.0.4; charset=utf-8');
    const { help, types, samples } = parseExposition(a.text);
    // Every sample belongs to a family with HELP and TYPE (summary samples add _sum and _count).
    for (const s of samples) {
      const family = s.name.replace(/_(sum|count)$/, '');
      expect(types.has(s.name) || types.get(family) === 'summary', s.name).toBe(true);
      expect(help.has(s.name) || help.has(family)).toBe(true);
    }
    const find = (name: string, labels: Record<string, string> = {}) =>
      samples.find((s) => s.name === name && Object.entries(labels).every(([k, v]) => s.labels[k] === v));
    expect(find('tendon_requests_total', { route: '/v1/score', status: '200' })!.value).toBeGreaterThanOrEqual(53);
    expect(find('tendon_requests_total', { route: '/v1/score', status: '400' })!.value).toBeGreaterThanOrEqual(1);
    expect(find('tendon_errors_total', { status: '400' })!.value).toBeGreaterThanOrEqual(1);
    expect(find('tendon_rows_total')!.value).toBeGreaterThanOrEqual(3 + 3 + 50 + 3);
    expect(types.get('tendon_request_seconds')).toBe('summary');
    const q50 = find('tendon_request_seconds', { quantile: '0.5' })!.value;
    const q99 = find('tendon_request_seconds', { quantile: '0.99' })!.value;
    expect(q50).toBeGreaterThan(0);
    expect(q99).toBeGreaterThanOrEqual(q50);
    expect(find('tendon_request_seconds_count')!.value).toBeGreaterThanOrEqual(55);
    expect(find('tendon_model_info', { checksum: model.checksum! })!.value).toBe(1);
    expect(find('tendon_drift_rows_total')!.value).toBeGreaterThanOrEqual(56);
    expect(samples.filter((s) => s.name === 'tendon_drift_flagged').map((s) => s.labels.feature)).toEqual(BAKERY_FEATURES);
    // The live tensor gauge is tfjs's own count for this process, and stays put across requests.
    expect(find('tendon_engine_tensors')!.value).toBe(liveTensorCount());
    await postJson(url('/v1/score'), { rows: LOAVES });
    const again = parseExposition((await call(url('/v1/counters'))).text).samples.find((s) => s.name === 'tendon_engine_tensors');
    expect(again!.value).toBe(find('tendon_engine_tensors')!.value);
    expect(find('tendon_resident_bytes')!.value).toBeGreaterThan(1 << 20);
  });
});

describe('bad requests get their status code and a message naming the row and field', () => {
  const cases: { name: string; body: string; status: number; message: RegExp }[] = [
    { name: 'malformed JSON', body: '{"rows": [[1, 2', status: 400, message: /^body: not valid JSON/ },
    { name: 'not an object', body: '[[1,2,3,4,5,6,7]]', status: 400, message: /^body: expected an object like \{"rows"/ },
    { name: 'rows missing', body: '{"row": []}', status: 400, message: /^rows: expected an array of rows, got nothing/ },
    { name: 'no rows', body: '{"rows": []}', status: 400, message: /^rows: empty/ },
    { name: 'a row too short', body: '{"rows": [[1,2,3,4,5,6,7], [1,2,3,4,5,6]]}', status: 400, message: /^rows\[1\]: expected 7 numbers, got 6$/ },
    { name: 'a row too long', body: '{"rows": [[1,2,3,4,5,6,7], [1,2,3,4,5,6,7,8]]}', status: 400, message: /^rows\[1\]: expected 7 numbers, got 8$/ },
    { name: 'non-number', body: '{"rows": [[1,2,3,"wet",5,6,7]]}', status: 400, message: /^rows\[0\]\[3\] \(humidity_pct\): not a number \(got "wet"\)$/ },
    { name: 'null value', body: '{"rows": [[1,2,3,4,null,6,7]]}', status: 400, message: /^rows\[0\]\[4\] \(belt_speed_m_min\): not a number \(got null\)$/ },
    {
      name: 'overflow',
      body: '{"rows": [[1,2,3,4,5,6,1e999]]}',
      status: 400,
      message: /^rows\[0\]\[6\] \(proof_time_min\): Infinity is not a finite float32 number$/,
    },
    {
      name: 'beyond float32',
      body: '{"rows": [[1e39,2,3,4,5,6,7]]}',
      status: 400,
      message: /^rows\[0\]\[0\] \(zone1_temp_c\): 1e\+39 is not a finite float32 number$/,
    },
    {
      name: 'unknown feature',
      body: JSON.stringify({
        rows: [Object.fromEntries(BAKERY_FEATURES.map((f) => [f, 1])), { ...Object.fromEntries(BAKERY_FEATURES.map((f) => [f, 1])), oven_colour: 3 }],
      }),
      status: 400,
      message: /^rows\[1\]\.oven_colour: unknown feature \(the model's features: zone1_temp_c, /,
    },
    {
      name: 'missing feature',
      body: JSON.stringify({ rows: [{ zone1_temp_c: 1 }] }),
      status: 400,
      message: /^rows\[0\]: missing features zone2_temp_c, zone3_temp_c, humidity_pct/,
    },
    {
      name: 'a string row',
      body: '{"rows": ["1,2,3"]}',
      status: 400,
      message: /^rows\[0\]: expected an array of 7 numbers or an object keyed by feature name, got "1,2,3"/,
    },
    { name: '__proto__ key', body: '{"rows": [{"__proto__": 1}]}', status: 400, message: /^rows\[0\]\.__proto__: unknown feature/ },
  ];
  it.each(cases)('$name -> $status', async ({ body, status, message }) => {
    const a = await postJson(url('/v1/score'), body);
    expect(a.status).toBe(status);
    expect(a.json.error.status).toBe(status);
    expect(a.json.error.message).toMatch(message);
  });

  it('a body over the limit answers 413: declared by Content-Length, before reading it', async () => {
    const a = await postJson(url('/v1/score'), { rows: Array.from({ length: 200 }, () => LOAVES[0]) });
    expect(a.status).toBe(413);
    expect(a.json.error.message).toMatch(/request body of \d+ bytes \(Content-Length\) passes the limit of 4096 bytes/);
  });

  it('a chunked body over the limit answers 413 once the limit is passed', async () => {
    const chunk = Buffer.from(' '.repeat(1024));
    const a = await rawRequest(url('/v1/score'), {
      method: 'POST',
      headers: { 'content-type': 'application/json', 'transfer-encoding': 'chunked' },
      chunks: [chunk, chunk, chunk, chunk, chunk],
    });
    expect(a.status).toBe(413);
    expect(JSON.parse(a.text).error.message).toMatch(/request body of more than \d+ bytes passes the limit of 4096 bytes/);
  });

  it('an unknown route answers 404 and a wrong method 405 with Allow', async () => {
    const missing = await call(url('/v1/predict'));
    expect(missing.status).toBe(404);
    expect(missing.json.error.message).toMatch(/^no route \/v1\/predict \(routes: \/v1\/score, /);
    const wrong = await call(url('/v1/score'));
    expect(wrong.status).toBe(405);
    expect(wrong.headers.get('allow')).toBe('POST');
    expect(wrong.json.error.message).toBe('GET is not allowed on /v1/score; use POST');
    const wrong2 = await call(url('/v1/counters'), { method: 'DELETE' });
    expect(wrong2.status).toBe(405);
    expect(wrong2.headers.get('allow')).toBe('GET');
  });

  it('hostile bodies never crash the process: it still answers afterwards', async () => {
    const hostile: (string | Buffer)[] = [
      Buffer.from([0xff, 0xfe, 0x00, 0xc3, 0x28]),
      '['.repeat(3000) + ']'.repeat(3000),
      '{"rows":' + '['.repeat(3000) + ']'.repeat(3000) + '}',
      JSON.stringify({ rows: [Object.fromEntries(Array.from({ length: 200 }, (_, i) => [`k${i}`, i]))] }),
      '{"rows": [[1,2,3,4,5,6,7]], "rows": 5}',
      '{"rows": {"length": 1, "0": [1,2,3,4,5,6,7]}}',
      '{"constructor": {"prototype": {"x": 1}}, "rows": [[{}, [], true, false, -0, 1e-400, "\\u0000"]]}',
      '',
      'null',
    ];
    for (const body of hostile) {
      const a = await rawRequest(url('/v1/score'), { method: 'POST', headers: { 'content-type': 'application/json' }, chunks: [body] });
      expect([400, 413]).toContain(a.status);
      expect(JSON.parse(a.text).error.message.length).toBeGreaterThan(0);
    }
    const weirdPaths = ['/%', '//v1//score', '/v1/score?x=%zz', '/v1/score/../about'];
    for (const p of weirdPaths) {
      const a = await rawRequest(url(p), { method: 'GET', chunks: [] });
      expect(a.status).toBeGreaterThanOrEqual(200);
    }
    expect((await call(url('/v1/alive'))).status).toBe(200);
    expect((await postJson(url('/v1/score'), { rows: LOAVES })).json.outputs).toEqual(model.run(LOAVES));
  });
});
