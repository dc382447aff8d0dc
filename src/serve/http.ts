/**
 * The HTTP endpoint: a request handler that mounts on Node's own `http` server (or on any
 * framework that hands over Node's request and response), and a small standalone server.
 *
 * Routes (under an optional prefix):
 *   POST /v1/score     {"rows": [[...], ...]} or {"rows": [{"feature": value, ...}]} -> outputs
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
 * served model), http-body / http-rows / http-problem (reading requests).
 */
export { ROUTES } from './http-routes.js';
export { createRequestHandler, type RequestHandlerOptions, type TendonRequestHandler } from './http-handler.js';
export type { ModelBatchRunner } from './http-score.js';
export { workerCount, type WorkerCount } from './http-pool.js';
export { startServer, type RunningServer, type ServerOptions } from './http-server.js';
