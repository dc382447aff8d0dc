import { UsageError } from '../../errors.js';
import { ROUTES, startServer, workerCount, type WorkerCount } from '../../serve/http.js';
import { noExtraPositionals, parseArgs, requirePositional } from '../args.js';
import type { Command } from '../command.js';

const flags = {
  port: { kind: 'integer', short: 'p', help: 'TCP port; 0 picks a free one and prints it', default: 8407 },
  host: { kind: 'string', help: 'address to listen on (loopback unless you choose otherwise)', default: '127.0.0.1' },
  'body-limit': { kind: 'integer', help: 'largest request body in bytes (413 past it)', default: 1 << 20 },
  'batch-rows': { kind: 'integer', help: 'most rows the micro-batcher runs at once', default: 64 },
  'wait-ms': { kind: 'number', help: 'longest a request waits for others to share its batch', default: 2 },
  'queue-rows': { kind: 'integer', help: 'rows allowed to wait; past it requests get 503 with Retry-After', default: 4096 },
  'drift-k': { kind: 'number', help: 'drift counters flag a feature whose mean moved more than this many sd', default: 3 },
  workers: { kind: 'string', help: "worker threads that run batches: 1 runs them in the main thread; 0 or 'auto' one per core", default: '1' },
  'no-watch': { kind: 'boolean', help: 'do not reload when the model file changes (SIGHUP still reloads)' },
} as const;

export const serve: Command = {
  name: 'serve',
  summary: 'serve a model over HTTP on loopback: score, about, alive, ready and counters routes; hot swap on file change or SIGHUP',
  usage: 'tendon serve MODEL [--port P] [--host H] [--body-limit BYTES] [--batch-rows N] [--wait-ms MS] [--queue-rows N] [--drift-k K] [--workers N|auto] [--no-watch]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const modelPath = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const port = f.port ?? 8407;
    if (port < 0 || port > 65535) throw new UsageError('--port', `must be 0 to 65535, got ${port}`);
    const positive = (flag: string, v: number | undefined) => {
      if (v !== undefined && !(v > 0)) throw new UsageError(`--${flag}`, `must be positive, got ${v}`);
      return v;
    };
    const waitMs = f['wait-ms'] ?? 2;
    if (!(waitMs >= 0)) throw new UsageError('--wait-ms', `must be 0 or more, got ${waitMs}`);
    const workers = parseWorkers(f.workers ?? '1');
    const running = await startServer({
      modelPath,
      port,
      host: f.host,
      bodyLimitBytes: positive('body-limit', f['body-limit']),
      batcher: { maxBatchRows: positive('batch-rows', f['batch-rows']), maxWaitMs: waitMs, maxQueueRows: positive('queue-rows', f['queue-rows']) },
      drift: { k: positive('drift-k', f['drift-k']) },
      watch: !f['no-watch'],
      workers,
      log: (line) => io.err(line + '\n'),
    });
    const model = running.handler.model;
    const threads = workerCount(workers);
    io.out(
      `serving ${modelPath} (checksum ${model?.checksum}) on ${running.url}` +
        (threads > 1 ? ` with ${threads} worker threads on the ${model?.engine} engine\n` : '\n') +
        `routes: POST ${ROUTES.score}, GET ${ROUTES.about}, ${ROUTES.alive}, ${ROUTES.ready}, ${ROUTES.counters}\n` +
        `SIGHUP reloads the model file; SIGTERM or Ctrl-C stops after answering what is queued\n`,
    );
    const reload = () => void running.handler.reload();
    await new Promise<void>((resolve) => {
      const stop = () => {
        process.off('SIGTERM', stop);
        process.off('SIGHUP', reload);
        io.signal.removeEventListener('abort', stop);
        resolve();
      };
      if (io.signal.aborted) return stop();
      process.on('SIGTERM', stop);
      process.on('SIGHUP', reload);
      io.signal.addEventListener('abort', stop);
    });
    io.err('tendon serve: stopping: no new connections; finishing queued requests\n');
    await running.close();
    io.err('tendon serve: stopped\n');
    return 0;
  },
};

/** '--workers auto' or a whole number >= 0 (0 also means one per core). */
function parseWorkers(text: string): WorkerCount {
  if (text === 'auto') return 'auto';
  if (!/^\d+$/.test(text)) throw new UsageError('--workers', `must be 'auto' or a whole number >= 0, got ${JSON.stringify(text)}`);
  return Number(text);
}
