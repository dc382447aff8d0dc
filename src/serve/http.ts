/**
 * The HTTP endpoint: a request handler that mounts on Node's own `http` server (or on any
 * framework that hands over Node's request and response), and a small standalone server.
 *
 * Routes (under an optional prefix):
 *   POST /v1/score     {"rows": [[...], ...]} or {"rows": [{"feature": value, ...}]} -> outputs;
 *                      also an NPY [rows, inputs] array (application/x-npy) or CSV (text/csv),
 *                      answered in the type Accept asks for (JSON by default)
 *   POST /v1/explain   the same rows -> per-feature attributions by name (?class=&steps=&baseline=)
 *   GET  /v1/about     the model's facts (what `tendon about --json` prints)
 *   GET  /v1/alive     the process answers
 *   GET  /v1/ready     a model is loaded and the endpoint is not shutting down
 *   GET  /v1/counters  Prometheus text exposition format
 *
 * Concurrent score requests go through the micro-batcher. Nothing a client sends can throw out
 * of the handler: every failure becomes a status code and a one-line JSON message.
 *
 * Re-exports only. The parts: http-routes (route table, writing answers), http-handler (the
 * served model and dispatch), http-score (batching and the score answer), http-server (the
 * standalone server's start and stop), http-pool (worker pools per
 * served model), http-body / http-rows / http-problem (reading requests), http-explain (attributions), http-formats /
 * http-parse / http-rows-fast / http-npy / http-csv (body types), parse-pool (parse threads),
 * http-access (bearer token, loopback).
 */
export { ROUTES } from './http-routes.js';
export { createRequestHandler, type RequestHandlerOptions, type TendonRequestHandler } from './http-handler.js';
export type { ModelBatchRunner } from './http-score.js';
export { workerCount, type WorkerCount } from './http-pool.js';
export { bearerToken, isLoopbackHost, type Authorize } from './http-access.js';
export { ACCEPTED_TYPES } from './http-formats.js';
export { startServer, type RunningServer, type ServerOptions } from './http-server.js';
