/**
 * The HTTP endpoint under hostile clients while well-behaved ones keep scoring: malformed and
 * oversized requests, slow clients that send headers or a body a byte at a time, and many
 * connections that never send anything. Each is refused or timed out; every good request gets
 * 200 with the right numbers.
 *
 * The model is one linear dense layer with inline weights, y = a + 10 b + 100 c + 0.5 (the
 * dense layer's definition y = x·W + b, common practice); inputs are small integers and
 * halves, exact in binary32 (IEEE 754-2008), so answers are compared exactly. Statuses follow
 * RFC 9110 (400, 404, 405, 408, 413) and RFC 6585 (431).
 */
import { connect, type Socket } from 'node:net';
import { mkdtemp, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startServer, type RunningServer } from '../../src/serve/http.js';
import { seededRandom } from '../fixtures/models.js';
import { runCli } from '../cli/run-cli.js';

const HEADERS_TIMEOUT_MS = 1000;
const REQUEST_TIMEOUT_MS = 2000;
const BODY_LIMIT = 64 * 1024;
/** Node sweeps for timed-out connections every headersTimeout / 4 here; allow that and a loaded machine. */
const SLACK_MS = 1500;

let running: RunningServer;

beforeAll(async () => {
  const dir = await mkdtemp(join(tmpdir(), 'tendon-endpoint-'));
  await writeFile(
    join(dir, 'linear.json'),
    JSON.stringify({
      inputs: 3,
      features: ['a', 'b', 'c'],
      labels: ['y'],
      layers: [{ kind: 'dense', size: 1, activation: 'linear', weight: [[1], [10], [100]], bias: [0.5] }],
    }),
  );
  const model = join(dir, 'linear.tendon');
  expect((await runCli('pack', join(dir, 'linear.json'), '-o', model)).code).toBe(0);
  running = await startServer({
    modelPath: model,
    port: 0,
    bodyLimitBytes: BODY_LIMIT,
    headersTimeoutMs: HEADERS_TIMEOUT_MS,
    requestTimeoutMs: REQUEST_TIMEOUT_MS,
    maxRowsPerRequest: 100,
    watch: false,
    log: () => undefined,
  });
});

afterAll(async () => {
  await running?.close();
});

const expected = ([a, b, c]: number[]) => a + 10 * b + 100 * c + 0.5;

/** A well-behaved client: score requests one after another until `untilMs` has passed, each checked. */
async function goodClient(seed: number, untilMs: number): Promise<{ ok: number; failures: string[] }> {
  const random = seededRandom(seed);
  const failures: string[] = [];
  let ok = 0;
  const started = performance.now();
  while (performance.now() - started < untilMs) {
    const rows = Array.from({ length: 1 + Math.floor(random() * 8) }, () => [0, 0, 0].map(() => Math.round(random() * 40 - 20) / 2));
    try {
      const res = await fetch(`${running.url}/v1/score`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ rows }) });
      const body = (await res.json()) as { outputs?: number[][] };
      const want = rows.map((r) => [expected(r)]);
      if (res.status !== 200) failures.push(`status ${res.status}`);
      else if (JSON.stringify(body.outputs) !== JSON.stringify(want)) failures.push(`outputs ${JSON.stringify(body.outputs)} != ${JSON.stringify(want)}`);
      else ok++;
    } catch (error) {
      failures.push(String(error));
    }
  }
  return { ok, failures };
}

interface RawResult {
  /** Status code of the first response, 0 when none came. */
  status: number;
  text: string;
  /** ms from connect until the server closed the connection. */
  closedAfter: number;
}

/**
 * A raw TCP client. `drive` writes what it likes (all at once, a byte at a time, nothing); the
 * result comes when the server closes the connection or `giveUpMs` passes (then the test fails).
 */
function rawClient(drive: (socket: Socket) => void | (() => void), giveUpMs = 10_000): Promise<RawResult> {
  return new Promise((resolve) => {
    const started = performance.now();
    const socket = connect(running.port, '127.0.0.1');
    let text = '';
    let stop: void | (() => void);
    socket.on('connect', () => {
      stop = drive(socket);
    });
    socket.on('data', (d) => (text += d.toString('latin1')));
    socket.on('error', () => undefined);
    const timer = setTimeout(() => socket.destroy(), giveUpMs);
    socket.on('close', () => {
      clearTimeout(timer);
      if (typeof stop === 'function') stop();
      const match = /^HTTP\/1\.1 (\d{3})/.exec(text);
      resolve({ status: match ? Number(match[1]) : 0, text, closedAfter: performance.now() - started });
    });
  });
}

/** Write `text` one byte every `everyMs`, then keep writing filler, until the server hangs up. */
function trickle(text: string, everyMs: number, filler = 'a') {
  return (socket: Socket) => {
    let at = 0;
    const timer = setInterval(() => {
      if (!socket.writable) return;
      socket.write(at < text.length ? text[at++] : filler);
    }, everyMs);
    return () => clearInterval(timer);
  };
}

const request = (method: string, path: string, body: string, headers: Record<string, string> = {}) => {
  const head = [`${method} ${path} HTTP/1.1`, 'host: 127.0.0.1', 'connection: close', ...Object.entries(headers).map(([k, v]) => `${k}: ${v}`)];
  if (!('content-length' in headers) && !('transfer-encoding' in headers)) head.push(`content-length: ${Buffer.byteLength(body)}`);
  return `${head.join('\r\n')}\r\n\r\n${body}`;
};
const sendAll = (bytes: string | Buffer) => (socket: Socket) => void socket.write(bytes);

const deepNesting = '{"rows": ' + '['.repeat(30_000) + ']'.repeat(30_000) + '}';

/** [name, client, status expected]. */
const MALFORMED: [string, () => Promise<RawResult>, number][] = [
  ['a request line that is not HTTP', () => rawClient(sendAll('GARBAGE\r\n\r\n')), 400],
  ['binary noise', () => rawClient(sendAll(Buffer.from(Array.from({ length: 512 }, (_, i) => (i * 37) % 256)))), 400],
  ["a 20 KB header (past Node's 16 KiB limit)", () => rawClient(sendAll(request('GET', '/v1/alive', '', { 'x-pad': 'p'.repeat(20_000) }))), 431],
  ['a Content-Length past the body limit', () => rawClient(sendAll(request('POST', '/v1/score', '', { 'content-length': String(BODY_LIMIT * 16) }))), 413],
  [
    'a chunked body that grows past the limit',
    () =>
      rawClient((s) => {
        s.write(request('POST', '/v1/score', '', { 'transfer-encoding': 'chunked' }));
        const chunk = 'x'.repeat(16 * 1024);
        for (let i = 0; i < 8; i++) s.write(`${chunk.length.toString(16)}\r\n${chunk}\r\n`);
      }),
    413,
  ],
  ['a Content-Length that is not a number', () => rawClient(sendAll(request('POST', '/v1/score', '{}', { 'content-length': 'lots' }))), 400],
  ['a body that is not JSON', () => rawClient(sendAll(request('POST', '/v1/score', '{"rows": [[1, 2, 3]'))), 400],
  ['JSON nested 30 000 deep', () => rawClient(sendAll(request('POST', '/v1/score', deepNesting))), 400],
  ['NaN spelled in JSON', () => rawClient(sendAll(request('POST', '/v1/score', '{"rows": [[NaN, 1, 2]]}'))), 400],
  ['a number past float32 (1e39)', () => rawClient(sendAll(request('POST', '/v1/score', '{"rows": [[1e39, 1, 2]]}'))), 400],
  ['a row too short', () => rawClient(sendAll(request('POST', '/v1/score', '{"rows": [[1, 2]]}'))), 400],
  ['a row too long', () => rawClient(sendAll(request('POST', '/v1/score', '{"rows": [[1, 2, 3, 4]]}'))), 400],
  ['an unknown feature name', () => rawClient(sendAll(request('POST', '/v1/score', '{"rows": [{"a": 1, "b": 2, "zz": 3}]}'))), 400],
  [
    'more rows than one request may carry',
    () => rawClient(sendAll(request('POST', '/v1/score', JSON.stringify({ rows: Array.from({ length: 101 }, () => [1, 2, 3]) })))),
    413,
  ],
  ['a wrong method', () => rawClient(sendAll(request('DELETE', '/v1/score', ''))), 405],
  ['an unknown route', () => rawClient(sendAll(request('GET', '/v1/../../etc/passwd', ''))), 404],
];

describe('hostile clients beside well-behaved ones', () => {
  it('silent connections, slow headers, slow bodies and malformed requests are cut off or refused; 4 good clients get every answer right', async () => {
    const started = performance.now();
    // 100 connections that never send a byte.
    const silent = Array.from({ length: 100 }, () => rawClient(() => undefined));
    // Headers a byte every 50 ms, never finishing (an endless header value).
    const slowHeaders = Array.from({ length: 5 }, () => rawClient(trickle('POST /v1/score HTTP/1.1\r\nhost: x\r\nx-slow: ', 50)));
    // A proper head, then the body a byte every 100 ms: 100 bytes would take 10 s.
    const body = JSON.stringify({ rows: [[1, 2, 3]] }).padEnd(100, ' ');
    const slowBodies = Array.from({ length: 5 }, () =>
      rawClient((s) => {
        s.write(request('POST', '/v1/score', '', { 'content-length': String(body.length) }));
        return trickle(body, 100, ' ')(s);
      }),
    );
    // A client that goes away mid-body.
    const vanishing = rawClient((s) => {
      s.write(request('POST', '/v1/score', '', { 'content-length': '1000' }) + '{"rows": [[1,');
      setTimeout(() => s.destroy(), 50);
    });
    const malformed = Promise.all(MALFORMED.map(([, client]) => client()));
    // Good clients keep going until every slow client has been cut off.
    const good = Promise.all([1, 2, 3, 4].map((seed) => goodClient(seed, REQUEST_TIMEOUT_MS + 500)));

    const [silentR, slowHeadersR, slowBodiesR, malformedR, goodR] = await Promise.all([
      Promise.all(silent),
      Promise.all(slowHeaders),
      Promise.all(slowBodies),
      malformed,
      good,
      vanishing,
    ]);

    // Every good request was answered 200 with y = a + 10 b + 100 c + 0.5.
    for (const g of goodR) {
      expect(g.failures).toEqual([]);
      expect(g.ok).toBeGreaterThanOrEqual(20);
    }
    // Connections that send nothing, or headers that never end: 408 once the headers timeout passes.
    for (const r of [...silentR, ...slowHeadersR]) {
      expect(r.status).toBe(408);
      expect(r.closedAfter).toBeGreaterThanOrEqual(HEADERS_TIMEOUT_MS - 50);
      expect(r.closedAfter).toBeLessThan(HEADERS_TIMEOUT_MS + SLACK_MS);
    }
    // Bodies a byte at a time: 408 once the whole-request timeout passes, long before they finish.
    for (const r of slowBodiesR) {
      expect(r.status).toBe(408);
      expect(r.closedAfter).toBeGreaterThanOrEqual(REQUEST_TIMEOUT_MS - 50);
      expect(r.closedAfter).toBeLessThan(REQUEST_TIMEOUT_MS + SLACK_MS);
    }
    MALFORMED.forEach(([name, , status], i) => {
      expect(malformedR[i].status, name).toBe(status);
    });
    // The JSON refusals are one-line JSON messages, not stack traces.
    const jsonRefusal = malformedR[MALFORMED.findIndex(([n]) => n === 'JSON nested 30 000 deep')];
    expect(jsonRefusal.text).toMatch(/\r\n\r\n\{"error":\{"status":400,"message":"[^\n]*"\}\}\n$/);
    expect(performance.now() - started).toBeLessThan(20_000);

    // Still serving afterwards, and the counters saw the refusals.
    const alive = await fetch(`${running.url}/v1/alive`);
    expect(alive.status).toBe(200);
    const counters = await (await fetch(`${running.url}/v1/counters`)).text();
    expect(counters).toMatch(/tendon_errors_total\{status="413"\} [1-9]/);
    expect(counters).toMatch(/tendon_requests_total\{route="\/v1\/score",status="200"\} (\d+)/);
    const scored = Number(/tendon_requests_total\{route="\/v1\/score",status="200"\} (\d+)/.exec(counters)![1]);
    expect(scored).toBe(goodR.reduce((n, g) => n + g.ok, 0));
  }, 60_000);
});
