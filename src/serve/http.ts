/**
 * The HTTP endpoint: a request handler that mounts on Node's own `http` server (or on any
 * framework that hands over Node's request and response), and a small standalone server.
 *
 * Routes (under an optional prefix):
 *   POST /v1/score     {"rows": [[...], ...]} or {"rows": [{"feature": value, ...}]} -> outputs
 *   GET  /v1/about     the model's facts (what `tendon show --json` prints)
 *   GET  /v1/alive     the process answers
 *   GET  /v1/ready     a model is loaded and the endpoint is not shutting down
 *   GET  /v1/counters  Prometheus text exposition format
 *
 * Concurrent score requests go through the micro-batcher. Nothing a client sends can throw out
 * of the handler: every failure becomes a status code and a one-line JSON message.
 */
import { createServer, type IncomingMessage, type Server, type ServerResponse } from 'node:http';
import type { AddressInfo } from 'node:net';
import { modelFacts } from '../model/facts.js';
import { DriftMonitor } from '../drift/index.js';
import { liveTensorCount } from '../engine/index.js';
import { openModel, type TendonModel } from '../tendon.js';
import { BusyError, MicroBatcher, type BatcherOptions } from './batcher.js';
import { readBody } from './http-body.js';
import { HttpProblem } from './http-problem.js';
import { parseScoreBody } from './http-rows.js';
import { METRICS_CONTENT_TYPE, ServiceCounters } from './metrics.js';
import { ModelSlot, type SwapOutcome } from './swap.js';

export const ROUTES = {
  score: '/v1/score',
  about: '/v1/about',
  alive: '/v1/alive',
  ready: '/v1/ready',
  counters: '/v1/counters',
} as const;

const METHODS: Record<string, 'GET' | 'POST'> = {
  [ROUTES.score]: 'POST',
  [ROUTES.about]: 'GET',
  [ROUTES.alive]: 'GET',
  [ROUTES.ready]: 'GET',
  [ROUTES.counters]: 'GET',
};

/** Runs one batch on a model; the default is the model's own engine session. */
export type ModelBatchRunner = (model: TendonModel, x: Float32Array, rows: number) => Promise<Float32Array> | Float32Array;

export interface RequestHandlerOptions {
  /** A model made resident by the caller (the caller disposes it), or a model file to open. */
  readonly model: TendonModel | string;
  /** Mount point, e.g. "/ml": routes become /ml/v1/score and so on. Default: none. */
  readonly prefix?: string;
  /** Micro-batcher settings (the width comes from the model). */
  readonly batcher?: Omit<BatcherOptions, 'width'>;
  /** Largest request body in bytes; a larger one is answered 413. Default 1 MiB. */
  readonly bodyLimitBytes?: number;
  /** Most rows in one score request. Default 10 000 (never more than the batcher's queue). */
  readonly maxRowsPerRequest?: number;
  /** Replace how a batch runs (a worker pool, a slow stand-in in tests). */
  readonly runBatch?: ModelBatchRunner;
  /** Drift counters against the model's normalisation statistics: threshold in sd, or false. Default { k: 3 }. */
  readonly drift?: { readonly k?: number } | false;
  /** Reload when the model file changes (a file model only). Default false; `tendon serve` turns it on. */
  readonly watch?: boolean | { readonly debounceMs: number };
  /** Seconds a client is asked to wait in Retry-After when the queue is full. Default 1. */
  readonly retryAfterSeconds?: number;
  /** One line per event (swap, refusal, internal error). Default: stderr. */
  readonly log?: (line: string) => void;
}

export interface TendonRequestHandler {
  (req: IncomingMessage, res: ServerResponse): void;
  /** Settles when the model is loaded (rejects with the load error for a file that cannot be used). */
  readonly ready: Promise<void>;
  readonly counters: ServiceCounters;
  /** The model being served, null while loading. */
  readonly model: TendonModel | null;
  /** Load the model file again (or `path`), check it and swap it in between batches. */
  reload(path?: string): Promise<SwapOutcome>;
  /** Refuse new score requests, finish the queued ones, then release the model. */
  close(): Promise<void>;
}

interface Generation {
  readonly checksum: string | null;
  readonly labels: readonly string[] | null;
}

/** How many past models' facts are kept to label answers of batches that ran on them. */
const GENERATIONS_KEPT = 64;

/**
 * A request handler for `node:http`.
 * @example
 * const handler = createRequestHandler({ model: 'bakery.tendon', prefix: '/ml' });
 * http.createServer((req, res) => req.url?.startsWith('/ml/') ? handler(req, res) : ownRoutes(req, res)).listen(8080);
 */
export function createRequestHandler(options: RequestHandlerOptions): TendonRequestHandler {
  const log = options.log ?? ((line: string) => void process.stderr.write(line + '\n'));
  const prefix = (options.prefix ?? '').replace(/\/+$/, '');
  const bodyLimit = options.bodyLimitBytes ?? 1 << 20;
  const retryAfter = String(options.retryAfterSeconds ?? 1);
  const counters = new ServiceCounters();
  const generations = new Map<number, Generation>();
  const runBatch: ModelBatchRunner = options.runBatch ?? ((model, x, rows) => model.run(x, rows));

  let slot: ModelSlot | null = null;
  let batcher: MicroBatcher | null = null;
  let drift: DriftMonitor | null = null;
  let closing = false;
  let closed: Promise<void> | null = null;

  const remember = (model: TendonModel, generation: number) => {
    generations.set(generation, { checksum: model.checksum, labels: model.labels });
    generations.delete(generation - GENERATIONS_KEPT);
    counters.model = { checksum: model.checksum ?? 'none', inputs: model.inputs, outputs: model.outputs, source: model.source ?? '(document)' };
    drift = options.drift === false ? null : DriftMonitor.forModel(model.doc, { k: options.drift?.k });
    counters.drift = drift?.report() ?? null;
  };

  const start = (model: TendonModel, owned: boolean) => {
    const s = new ModelSlot(model, model.source, { log, onSwap: (m) => remember(m, s.generation), onOutcome: (o) => counters.swapped(o.swapped) }, owned);
    slot = s;
    remember(model, 1);
    const maxQueue = options.batcher?.maxQueueRows ?? 4096;
    batcher = new MicroBatcher(
      async (x, rows) => {
        const lease = s.acquire();
        try {
          const y = await runBatch(lease.model, x, rows);
          return withGeneration(y, rows, lease.generation);
        } finally {
          s.release(lease);
        }
      },
      { ...options.batcher, width: model.inputs, maxQueueRows: maxQueue },
    );
    if (options.watch && model.source) s.watch(typeof options.watch === 'object' ? options.watch.debounceMs : undefined);
  };

  const given = options.model;
  let loadFailure: string | null = null;
  const ready: Promise<void> = typeof given === 'string' ? openModel(given).then((m) => start(m, true)) : Promise.resolve().then(() => start(given, false));
  // The failure is reported by /v1/ready and by score answers; `ready` rejects for whoever awaits it.
  ready.catch((error: unknown) => {
    loadFailure = error instanceof Error ? error.message : String(error);
  });
  const notLoaded = () =>
    new HttpProblem(503, loadFailure ? `no model: ${loadFailure}` : 'the model is still loading', loadFailure ? {} : { 'retry-after': retryAfter });

  const maxRows = Math.min(options.maxRowsPerRequest ?? 10_000, options.batcher?.maxQueueRows ?? 4096);

  async function score(req: IncomingMessage): Promise<{ status: number; body: unknown; rows: number }> {
    if (closing) throw new HttpProblem(503, 'shutting down; no new requests are taken', { 'retry-after': retryAfter, connection: 'close' });
    const model = slot?.current;
    if (!slot || !batcher || !model) throw notLoaded();
    const text = (await readBody(req, bodyLimit)).toString('utf8');
    const { rows, x } = parseScoreBody(text, { inputs: model.inputs, features: model.features, maxRows });
    let y: Float32Array;
    try {
      y = await batcher.submit(x);
    } catch (error) {
      if (error instanceof BusyError) throw new HttpProblem(503, error.message, { 'retry-after': retryAfter });
      throw error;
    }
    const width = y.length / rows - 1;
    const generation = y[width];
    const facts = generations.get(generation) ?? { checksum: null, labels: null };
    const outputs: number[][] = [];
    for (let r = 0; r < rows; r++) outputs.push(Array.from(y.subarray(r * (width + 1), r * (width + 1) + width)));
    if (drift && generation === slot.generation) {
      drift.add(x, rows);
      counters.drift = drift.report();
    }
    const top = width > 1 ? outputs.map(argmax) : null;
    const body: Record<string, unknown> = { model: facts.checksum, outputs };
    if (top) body.top = top;
    if (facts.labels) {
      body.labels = facts.labels;
      if (top) body.topLabel = top.map((i) => facts.labels![i]);
    }
    return { status: 200, body, rows };
  }

  function about(): unknown {
    const model = slot?.current;
    if (!model) throw notLoaded();
    const file =
      model.source && model.checksum && model.fileBytes !== null
        ? { path: model.source, checksum: model.checksum, bytes: model.fileBytes, version: model.formatVersion ?? '' }
        : null;
    return modelFacts(model.doc, file);
  }

  async function route(req: IncomingMessage, res: ServerResponse, path: string): Promise<{ status: number; rows: number }> {
    const method = METHODS[path];
    if (!method) throw new HttpProblem(404, `no route ${printablePath(prefix + path)} (routes: ${Object.keys(METHODS).map((p) => prefix + p).join(', ')})`);
    if (req.method !== method) throw new HttpProblem(405, `${req.method} is not allowed on ${prefix + path}; use ${method}`, { allow: method });
    switch (path) {
      case ROUTES.score: {
        const answer = await score(req);
        sendJson(res, answer.status, answer.body, closing ? { connection: 'close' } : {});
        return answer;
      }
      case ROUTES.about:
        sendJson(res, 200, about());
        return { status: 200, rows: 0 };
      case ROUTES.alive:
        sendJson(res, 200, { alive: true });
        return { status: 200, rows: 0 };
      case ROUTES.ready: {
        const ok = slot !== null && !closing;
        const status = ok ? 200 : 503;
        sendJson(res, status, { ready: ok, reason: ok ? undefined : closing ? 'shutting down' : notLoaded().message });
        return { status, rows: 0 };
      }
      default:
        send(res, 200, counters.render({ tensors: liveTensorCount(), residentBytes: process.memoryUsage().rss }), METRICS_CONTENT_TYPE);
        return { status: 200, rows: 0 };
    }
  }

  const handler = (req: IncomingMessage, res: ServerResponse): void => {
    const started = performance.now();
    let label = 'other';
    // A socket error after the client went away is not ours to crash on.
    res.on('error', () => undefined);
    req.on('error', () => undefined);
    const finish = (status: number, rows: number) => counters.request(label, status, (performance.now() - started) / 1000, rows);
    const fail = (error: unknown) => {
      const problem = error instanceof HttpProblem ? error : null;
      if (!problem) log(`tendon serve: internal error on ${printablePath(req.url ?? '')}: ${error instanceof Error ? error.message : String(error)}`);
      const status = problem?.status ?? 500;
      const message = problem?.message ?? 'internal error; the request was not scored';
      if (!res.headersSent) sendJson(res, status, { error: { status, message } }, problem?.headers ?? {});
      else res.destroy();
      finish(status, 0);
    };
    try {
      const path = pathOf(req.url, prefix);
      if (path !== null && path in METHODS) label = prefix + path;
      if (path === null) throw new HttpProblem(404, `no route ${printablePath(req.url ?? '')}`);
      route(req, res, path).then((r) => finish(r.status, r.rows), fail);
    } catch (error) {
      fail(error);
    }
  };

  // defineProperty, not Object.assign: assign would copy the getter's value once (null while loading).
  Object.defineProperty(handler, 'model', { get: (): TendonModel | null => slot?.current ?? null, enumerable: true });
  return Object.assign(handler as typeof handler & { readonly model: TendonModel | null }, {
    ready,
    counters,
    reload(path?: string): Promise<SwapOutcome> {
      if (!slot) return Promise.resolve({ swapped: false as const, reason: 'the model is still loading' });
      return slot.reload(path);
    },
    close(): Promise<void> {
      closing = true;
      closed ??= ready
        .catch(() => undefined)
        .then(async () => {
          await batcher?.close();
          await slot?.close();
        });
      return closed;
    },
  });
}

/** Append the generation that ran the batch as one more column, so each answer names its model. */
function withGeneration(y: Float32Array, rows: number, generation: number): Float32Array {
  const width = y.length / rows;
  const out = new Float32Array(rows * (width + 1));
  for (let r = 0; r < rows; r++) {
    out.set(y.subarray(r * width, (r + 1) * width), r * (width + 1));
    out[r * (width + 1) + width] = generation;
  }
  return out;
}

function argmax(row: readonly number[]): number {
  let best = 0;
  for (let j = 1; j < row.length; j++) if (row[j] > row[best]) best = j;
  return best;
}

/** The route path below `prefix`, or null when the URL is outside it or unreadable. */
function pathOf(url: string | undefined, prefix: string): string | null {
  if (!url) return null;
  let pathname: string;
  try {
    pathname = new URL(url, 'http://endpoint.invalid').pathname;
  } catch {
    return null;
  }
  if (!prefix) return pathname;
  if (pathname !== prefix && !pathname.startsWith(prefix + '/')) return null;
  return pathname.slice(prefix.length) || '/';
}

function printablePath(p: string): string {
  const one = p.replace(/[^\x20-\x7e]/g, '?');
  return one.length > 80 ? `${one.slice(0, 80)}...` : one;
}

function send(res: ServerResponse, status: number, text: string, type: string, headers: Readonly<Record<string, string>> = {}): void {
  const body = Buffer.from(text, 'utf8');
  res.writeHead(status, { ...headers, 'content-type': type, 'content-length': String(body.length), 'cache-control': 'no-store' });
  res.end(body);
}

function sendJson(res: ServerResponse, status: number, value: unknown, headers: Readonly<Record<string, string>> = {}): void {
  send(res, status, JSON.stringify(value) + '\n', 'application/json; charset=utf-8', headers);
}

export interface ServerOptions extends Omit<RequestHandlerOptions, 'model'> {
  readonly modelPath: string;
  /** 0 picks any free port. Default 0. */
  readonly port?: number;
  /** Default 127.0.0.1: loopback only, until the caller decides otherwise. */
  readonly host?: string;
  /** Longest a graceful close waits for open connections after the queue has drained. Default 5000 ms. */
  readonly closeTimeoutMs?: number;
  /** Longest wait for a request's headers (a client that connects and sends nothing). Default 10 000 ms. */
  readonly headersTimeoutMs?: number;
  /** Longest wait for a whole request, body included (a client that sends a byte at a time). Default 30 000 ms. */
  readonly requestTimeoutMs?: number;
}

/** Node answers with these statuses on its own when no 'clientError' listener is set; keep them. */
const CLIENT_ERROR_STATUS: Record<string, string> = {
  ERR_HTTP_REQUEST_TIMEOUT: '408 Request Timeout',
  HPE_HEADER_OVERFLOW: '431 Request Header Fields Too Large',
};

export interface RunningServer {
  readonly server: Server;
  readonly handler: TendonRequestHandler;
  readonly host: string;
  readonly port: number;
  /** e.g. http://127.0.0.1:40123 */
  readonly url: string;
  /** Stop accepting, finish what is queued, answer it, release the model. */
  close(): Promise<void>;
}

/**
 * Open a model file and serve it on a `node:http` server.
 * @example
 * const running = await startServer({ modelPath: 'bakery.tendon', port: 0 });
 * console.log(running.url); // http://127.0.0.1:40123
 * await running.close();
 * @throws ModelFileError when the model file cannot be used.
 */
export async function startServer(options: ServerOptions): Promise<RunningServer> {
  const handler = createRequestHandler({ ...options, model: options.modelPath });
  await handler.ready;
  const headersTimeout = options.headersTimeoutMs ?? 10_000;
  // Node enforces both timeouts only when it sweeps its connections (every 30 s by default), so
  // a silent client would hold a socket up to 40 s: sweep every second, or faster for short limits.
  const server = createServer({ connectionsCheckingInterval: Math.max(50, Math.min(1000, Math.floor(headersTimeout / 4))) }, handler);
  // A client that opens a connection and never sends must not hold the process.
  server.requestTimeout = options.requestTimeoutMs ?? 30_000;
  server.headersTimeout = headersTimeout;
  const host = options.host ?? '127.0.0.1';
  try {
    await new Promise<void>((resolve, reject) => {
      server.once('error', reject);
      server.listen(options.port ?? 0, host, () => {
        server.off('error', reject);
        resolve();
      });
    });
  } catch (error) {
    await handler.close();
    throw error;
  }
  server.on('clientError', (error: Error & { code?: string }, socket) => {
    const status = CLIENT_ERROR_STATUS[error.code ?? ''] ?? '400 Bad Request';
    if (socket.writable) socket.end(`HTTP/1.1 ${status}\r\nconnection: close\r\ncontent-length: 0\r\n\r\n`);
    else socket.destroy();
  });
  const port = (server.address() as AddressInfo).port;
  let closing: Promise<void> | null = null;
  return {
    server,
    handler,
    host,
    port,
    url: `http://${host.includes(':') ? `[${host}]` : host}:${port}`,
    close() {
      closing ??= (async () => {
        const stopped = new Promise<void>((resolve) => server.close(() => resolve()));
        server.closeIdleConnections();
        await handler.close();
        server.closeIdleConnections();
        const timer = setTimeout(() => server.closeAllConnections(), options.closeTimeoutMs ?? 5000);
        await stopped;
        clearTimeout(timer);
      })();
      return closing;
    },
  };
}
