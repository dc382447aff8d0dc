/**
 * The request handler: it holds the served model (slot, batcher, drift monitor, counters),
 * dispatches each request to its route, and turns every failure into a status code and a
 * one-line JSON message, so nothing a client sends can throw out of it.
 */
import type { IncomingMessage, ServerResponse } from 'node:http';
import { modelFacts } from '../model/facts.js';
import { DriftMonitor } from '../drift/index.js';
import { RuntimeFailure } from '../errors.js';
import { liveTensorCount } from '../engine/index.js';
import { openModel, type TendonModel } from '../tendon.js';
import { BusyError, type BatcherOptions, type MicroBatcher } from './batcher.js';
import { bearerChallenge, type Authorize } from './http-access.js';
import { readBody } from './http-body.js';
import { EXPLAIN_MAX_ROWS, explainRequest } from './http-explain.js';
import { csvAnswer } from './http-csv.js';
import { ACCEPTED_TYPES, BODY_TYPES, answerFormatOf, bodyFormatOf, type BodyFormat } from './http-formats.js';
import { encodeNpyAnswer } from './http-npy.js';
import { parseRequestBody } from './http-parse.js';
import { HttpProblem } from './http-problem.js';
import { METHODS, ROUTES, pathOf, printablePath, send, sendJson } from './http-routes.js';
import { GENERATIONS_KEPT, outputNames, scoreAnswerText, slotBatcher, splitGeneration, type Generation, type ModelBatchRunner } from './http-score.js';
import { ParsePool, parseWorkerScript } from './parse-pool.js';
import { PooledRunner, workerCount, type WorkerCount } from './http-pool.js';
import { METRICS_CONTENT_TYPE, ServiceCounters } from './metrics.js';
import { ModelSlot, type SwapOutcome } from './swap.js';

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
  /** Most rows in one explain request (float64 work on the main thread). Default 100. */
  readonly maxExplainRows?: number;
  /** Replace how a batch runs (a slow stand-in in tests). Not with `workers` above 1. */
  readonly runBatch?: ModelBatchRunner;
  /**
   * Worker threads that run batches, each holding the served model on the main thread's engine.
   * Default 1: batches run in the main thread. 0 or 'auto': one per core. Above 1, up to that
   * many batches run at once unless `batcher.maxInFlight` says otherwise.
   */
  readonly workers?: WorkerCount;
  /** The built worker script (dist/worker.js) when `workers` is above 1; default: the one beside the pool module. */
  readonly workerScript?: string | URL;
  /** The built parse thread script (dist/parse-worker.js); default: beside `workerScript`, else beside this module. */
  readonly parseWorkerScript?: string | URL;
  /** Drift counters against the model's normalisation statistics: threshold in sd, or false. Default { k: 3 }. */
  readonly drift?: { readonly k?: number } | false;
  /** Reload when the model file changes (a file model only). Default false; `tendon serve` turns it on. */
  readonly watch?: boolean | { readonly debounceMs: number };
  /** Seconds a client is asked to wait in Retry-After when the queue is full. Default 1. */
  readonly retryAfterSeconds?: number;
  /**
   * Who may call: false (or a rejection) is answered 401 with WWW-Authenticate. The liveness and
   * readiness routes never ask. Default: everyone. `bearerToken(secret)` checks a bearer token.
   */
  readonly authorize?: Authorize;
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
  /** Worker threads alive now, in every pool including ones still closing; 0 without workers. */
  readonly liveWorkers: number;
  /** Load the model file again (or `path`), check it and swap it in between batches. */
  reload(path?: string): Promise<SwapOutcome>;
  /** Refuse new score requests, finish the queued ones, then release the model. */
  close(): Promise<void>;
}

/**
 * A request handler for `node:http`.
 * @example
 * const handler = createRequestHandler({ model: 'bakery.tendon', prefix: '/ml' });
 * http.createServer((req, res) => req.url?.startsWith('/ml/') ? handler(req, res) : ownRoutes(req, res)).listen(8080);
 */
export function createRequestHandler(options: RequestHandlerOptions): TendonRequestHandler {
  const state = handlerState(options);
  const { counters, pools, parsers } = state;
  let closed: Promise<void> | null = null;

  const given = options.model;
  const ready: Promise<void> =
    typeof given === 'string' ? openModel(given).then((m) => startPooled(state, m, true)) : Promise.resolve().then(() => startPooled(state, given, false));
  // The failure is reported by /v1/ready and by score answers; `ready` rejects for whoever awaits it.
  ready.catch((error: unknown) => {
    state.loadFailure = error instanceof Error ? error.message : String(error);
  });

  const handler = (req: IncomingMessage, res: ServerResponse): void => handleRequest(state, req, res);

  // defineProperty, not Object.assign: assign would copy the getter's value once (null while loading).
  Object.defineProperty(handler, 'model', { get: (): TendonModel | null => state.slot?.current ?? null, enumerable: true });
  Object.defineProperty(handler, 'liveWorkers', { get: (): number => pools?.liveWorkers ?? 0, enumerable: true });
  return Object.assign(handler as typeof handler & { readonly model: TendonModel | null; readonly liveWorkers: number }, {
    ready,
    counters,
    reload(path?: string): Promise<SwapOutcome> {
      if (!state.slot) return Promise.resolve({ swapped: false as const, reason: 'the model is still loading' });
      return state.slot.reload(path);
    },
    close(): Promise<void> {
      state.closing = true;
      closed ??= ready
        .catch(() => undefined)
        .then(async () => {
          await state.batcher?.close();
          await state.slot?.close();
          await pools?.close();
          await parsers?.close();
        });
      return closed;
    },
  });
}

/** What the routes share: settings fixed at creation, the thread pools, and the served model's state. */
interface HandlerState {
  readonly options: RequestHandlerOptions;
  readonly log: (line: string) => void;
  readonly prefix: string;
  readonly bodyLimit: number;
  readonly retryAfter: string;
  readonly maxRows: number;
  readonly counters: ServiceCounters;
  readonly generations: Map<number, Generation>;
  /** Worker threads that run batches (1: the main thread). */
  readonly size: number;
  readonly pools: PooledRunner | null;
  readonly parsers: ParsePool | null;
  readonly runBatch: ModelBatchRunner;
  slot: ModelSlot | null;
  batcher: MicroBatcher | null;
  drift: DriftMonitor | null;
  closing: boolean;
  loadFailure: string | null;
}

/** The settings with their defaults, and the worker and parse pools. */
function handlerState(options: RequestHandlerOptions): HandlerState {
  const log = options.log ?? ((line: string) => void process.stderr.write(line + '\n'));
  const prefix = (options.prefix ?? '').replace(/\/+$/, '');
  const bodyLimit = options.bodyLimitBytes ?? 1 << 20;
  const retryAfter = String(options.retryAfterSeconds ?? 1);
  const counters = new ServiceCounters();
  const generations = new Map<number, Generation>();
  const size = workerCount(options.workers);
  if (size > 1 && options.runBatch)
    throw new RuntimeFailure(`createRequestHandler: runBatch cannot be combined with workers = ${size}; the workers run the batches`);
  const minShareRows = options.batcher?.maxBatchRows ?? 64;
  const pools = size > 1 ? new PooledRunner({ size, workerScript: options.workerScript, minShareRows, log }) : null;
  // With worker threads, JSON and CSV bodies are parsed on threads of their own too.
  const parseScript = size > 1 ? parseWorkerScript(options.parseWorkerScript, options.workerScript) : null;
  if (size > 1 && !parseScript) log('tendon serve: no parse-worker.js beside the worker script; request bodies are parsed on the main thread');
  const parsers = parseScript ? new ParsePool(size, parseScript) : null;
  const runBatch: ModelBatchRunner = options.runBatch ?? pools?.run ?? ((model, x, rows) => model.run(x, rows));
  const maxRows = Math.min(options.maxRowsPerRequest ?? 10_000, options.batcher?.maxQueueRows ?? 4096);
  return {
    options,
    log,
    prefix,
    bodyLimit,
    retryAfter,
    maxRows,
    counters,
    generations,
    size,
    pools,
    parsers,
    runBatch,
    slot: null,
    batcher: null,
    drift: null,
    closing: false,
    loadFailure: null,
  };
}

/** Record a model now served: its generation's facts, the counters' model, a fresh drift monitor. */
function rememberModel(state: HandlerState, model: TendonModel, generation: number): void {
  const { options, counters, generations } = state;
  generations.set(generation, { checksum: model.checksum, labels: model.labels });
  generations.delete(generation - GENERATIONS_KEPT);
  counters.model = { checksum: model.checksum ?? 'none', inputs: model.inputs, outputs: model.outputs, source: model.source ?? '(document)' };
  state.drift = options.drift === false ? null : DriftMonitor.forModel(model.doc, { k: options.drift?.k });
  counters.driftFrom(() => state.drift?.report() ?? null);
}

/** The worker pools take the model first; a model the handler owns is released if they fail. */
async function startPooled(state: HandlerState, model: TendonModel, owned: boolean): Promise<void> {
  try {
    await state.pools?.prepare(model);
  } catch (error) {
    if (owned) model.dispose();
    throw error;
  }
  startServing(state, model, owned);
}

/** Put the model in its slot and start the batcher (and the file watch). */
function startServing(state: HandlerState, model: TendonModel, owned: boolean): void {
  const { options, pools, log, counters } = state;
  const s = new ModelSlot(
    model,
    model.source,
    {
      log,
      onSwap: (m) => rememberModel(state, m, s.generation),
      onOutcome: (o) => counters.swapped(o.swapped),
      // A new model gets its pool before it is swapped in; the old pool closes after its last batch.
      prepare: pools ? (m) => pools.prepare(m) : undefined,
      onRetired: pools ? (m) => pools.retire(m) : undefined,
    },
    owned,
  );
  state.slot = s;
  rememberModel(state, model, 1);
  const maxQueue = options.batcher?.maxQueueRows ?? 4096;
  const maxInFlight = options.batcher?.maxInFlight ?? (pools ? state.size : undefined);
  state.batcher = slotBatcher(s, state.runBatch, { ...options.batcher, width: model.inputs, maxQueueRows: maxQueue, maxInFlight });
  if (options.watch && model.source) s.watch(typeof options.watch === 'object' ? options.watch.debounceMs : undefined);
}

function notLoaded(state: HandlerState): HttpProblem {
  const { loadFailure } = state;
  return new HttpProblem(503, loadFailure ? `no model: ${loadFailure}` : 'the model is still loading', loadFailure ? {} : { 'retry-after': state.retryAfter });
}

interface ScoreReply {
  readonly rows: number;
  readonly body: string | Buffer;
  readonly type: string;
  readonly headers: Record<string, string>;
}

async function score(state: HandlerState, req: IncomingMessage): Promise<ScoreReply> {
  const { retryAfter, slot, batcher, parsers } = state;
  if (state.closing) throw new HttpProblem(503, 'shutting down; no new requests are taken', { 'retry-after': retryAfter, connection: 'close' });
  const model = slot?.current;
  if (!slot || !batcher || !model) throw notLoaded(state);
  const format = bodyFormatOf(req);
  const answerFormat = answerFormatOf(req);
  const bytes = await readBody(req, state.bodyLimit);
  const shape = { inputs: model.inputs, features: model.features, maxRows: state.maxRows };
  // NPY is a copy of bytes either way; text formats go to the parse threads when there are some.
  // The body is this request's own buffer, so the parse thread may take it without a copy.
  const { rows, x } = parsers && format !== 'npy' ? await parsers.parse(format, bytes, shape, { owned: true }) : parseRequestBody(format, bytes, shape);
  let y: Float32Array;
  try {
    // x is this request's own array (parsed or a view of its body), so the batcher need not copy it.
    y = await batcher.submit(x, { owned: true });
  } catch (error) {
    if (error instanceof BusyError) throw new HttpProblem(503, error.message, { 'retry-after': retryAfter });
    throw error;
  }
  const generation = y[y.length / rows - 1]!;
  // Drift counts rows scored by the model now served, not by one swapped out meanwhile.
  const drift = state.drift;
  if (drift && generation === slot.generation) drift.add(x, rows);
  return scoreReply(state.generations, y, rows, answerFormat, generation);
}

/** The scored rows in the answer format asked for. */
function scoreReply(generations: Map<number, Generation>, y: Float32Array, rows: number, answerFormat: BodyFormat, generation: number): ScoreReply {
  if (answerFormat === 'json') return { rows, body: scoreAnswerText(y, rows, generations), type: `${BODY_TYPES.json}; charset=utf-8`, headers: {} };
  const split = splitGeneration(y, rows);
  const facts = generations.get(generation);
  // The answer has no room for the model's checksum in its body, so it rides in a header.
  const headers: Record<string, string> = facts?.checksum ? { 'tendon-model': facts.checksum } : {};
  if (answerFormat === 'npy') return { rows, body: encodeNpyAnswer(split.outputs, rows, split.width), type: BODY_TYPES.npy, headers };
  return { rows, body: csvAnswer(split.outputs, rows, outputNames(facts?.labels ?? null, split.width)), type: `${BODY_TYPES.csv}; charset=utf-8`, headers };
}

function about(state: HandlerState): unknown {
  const model = state.slot?.current;
  if (!model) throw notLoaded(state);
  const file =
    model.source && model.checksum && model.fileBytes !== null
      ? { path: model.source, checksum: model.checksum, bytes: model.fileBytes, version: model.formatVersion ?? '' }
      : null;
  return { ...modelFacts(model.doc, file), accepts: ACCEPTED_TYPES };
}

async function route(state: HandlerState, req: IncomingMessage, res: ServerResponse, path: string): Promise<{ status: number; rows: number }> {
  const { prefix, retryAfter, options } = state;
  const method = METHODS[path];
  if (!method)
    throw new HttpProblem(
      404,
      `no route ${printablePath(prefix + path)} (routes: ${Object.keys(METHODS)
        .map((p) => prefix + p)
        .join(', ')})`,
    );
  if (req.method !== method) throw new HttpProblem(405, `${req.method} is not allowed on ${prefix + path}; use ${method}`, { allow: method });
  switch (path) {
    case ROUTES.score: {
      const answer = await score(state, req);
      const body = typeof answer.body === 'string' ? Buffer.from(answer.body, 'utf8') : answer.body;
      res.writeHead(200, {
        ...answer.headers,
        ...(state.closing ? { connection: 'close' } : {}),
        'content-type': answer.type,
        'content-length': String(body.length),
        'cache-control': 'no-store',
        vary: 'accept',
      });
      res.end(body);
      return { status: 200, rows: answer.rows };
    }
    case ROUTES.explain: {
      if (state.closing) throw new HttpProblem(503, 'shutting down; no new requests are taken', { 'retry-after': retryAfter, connection: 'close' });
      const model = state.slot?.current;
      if (!model) throw notLoaded(state);
      const answer = await explainRequest(req, model, { bodyLimitBytes: state.bodyLimit, maxRows: options.maxExplainRows ?? EXPLAIN_MAX_ROWS });
      sendJson(res, 200, answer.body);
      return { status: 200, rows: answer.rows };
    }
    case ROUTES.about:
      sendJson(res, 200, about(state));
      return { status: 200, rows: 0 };
    case ROUTES.alive:
      sendJson(res, 200, { alive: true });
      return { status: 200, rows: 0 };
    case ROUTES.ready: {
      const ok = state.slot !== null && !state.closing;
      const status = ok ? 200 : 503;
      sendJson(res, status, { ready: ok, reason: ok ? undefined : state.closing ? 'shutting down' : notLoaded(state).message });
      return { status, rows: 0 };
    }
    default:
      send(res, 200, state.counters.render({ tensors: liveTensorCount(), residentBytes: process.memoryUsage().rss }), METRICS_CONTENT_TYPE);
      return { status: 200, rows: 0 };
  }
}

/** One request: access check, route, and every failure answered as a status and a one-line message. */
function handleRequest(state: HandlerState, req: IncomingMessage, res: ServerResponse): void {
  const { prefix, options, log, counters } = state;
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
    // Probes stay open, so an orchestrator needs no secret to see the process is up.
    const open = !options.authorize || path === ROUTES.alive || path === ROUTES.ready;
    if (open) {
      route(state, req, res, path).then((r) => finish(r.status, r.rows), fail);
      return;
    }
    Promise.resolve()
      .then(() => options.authorize!(req))
      .then(
        (ok) => {
          if (!ok) throw new HttpProblem(401, 'a valid bearer token is required (Authorization: Bearer TOKEN)', { 'www-authenticate': bearerChallenge(req) });
        },
        (error: unknown) => {
          log(`tendon serve: authorize failed on ${printablePath(req.url ?? '')}: ${error instanceof Error ? error.message : String(error)}`);
          throw new HttpProblem(401, 'the request could not be authorized', { 'www-authenticate': bearerChallenge(req) });
        },
      )
      .then(() => route(state, req, res, path))
      .then((r) => finish(r.status, r.rows), fail);
  } catch (error) {
    fail(error);
  }
}
