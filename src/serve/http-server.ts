/**
 * The standalone server: a `node:http` server around the request handler, with timeouts that
 * free sockets held by silent or trickling clients, Node's own answers to malformed requests,
 * and a graceful close that answers what is queued before the process lets go.
 */
import { createServer, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import { UsageError } from '../errors.js';
import { isLoopbackHost } from './http-access.js';
import { createRequestHandler, type RequestHandlerOptions, type TendonRequestHandler } from './http-handler.js';

export interface ServerOptions extends Omit<RequestHandlerOptions, 'model'> {
  readonly modelPath: string;
  /** 0 picks any free port. Default 0. */
  readonly port?: number;
  /** Default 127.0.0.1: loopback only, until the caller decides otherwise. */
  readonly host?: string;
  /**
   * Serve a host other than loopback without `authorize`. Default false: such a server refuses
   * to start, since anyone who can reach the port could score and read the model's facts.
   */
  readonly open?: boolean;
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
 * @throws ModelFileError when the model file cannot be used; UsageError for a host other than
 *   loopback with neither `authorize` nor `open`.
 */
export async function startServer(options: ServerOptions): Promise<RunningServer> {
  const host = options.host ?? '127.0.0.1';
  if (!isLoopbackHost(host) && !options.authorize && !options.open) {
    throw new UsageError(
      '--host',
      `${host} is not a loopback address, so other machines could call the endpoint: give a bearer token (--token-file FILE, or the authorize option) or say --open (open: true) to serve without one`,
    );
  }
  const handler = createRequestHandler({ ...options, model: options.modelPath });
  await handler.ready;
  const headersTimeout = options.headersTimeoutMs ?? 10_000;
  // Node enforces both timeouts only when it sweeps its connections (every 30 s by default), so
  // a silent client would hold a socket up to 40 s: sweep every second, or faster for short limits.
  const server = createServer({ connectionsCheckingInterval: Math.max(50, Math.min(1000, Math.floor(headersTimeout / 4))) }, handler);
  // A client that opens a connection and never sends must not hold the process.
  server.requestTimeout = options.requestTimeoutMs ?? 30_000;
  server.headersTimeout = headersTimeout;
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
