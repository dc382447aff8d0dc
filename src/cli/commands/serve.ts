import { readFile } from 'node:fs/promises';
import { UsageError } from '../../errors.js';
import { ACCEPTED_TYPES, ROUTES, bearerToken, isLoopbackHost, startServer, workerCount, type WorkerCount } from '../../serve/http.js';
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
  'token-file': { kind: 'string', help: 'a file holding the bearer token clients must send (Authorization: Bearer TOKEN); alive and ready stay open' },
  open: { kind: 'boolean', help: 'serve a host other than loopback without a token (only behind your own access control)' },
} as const;

export const serve: Command = {
  name: 'serve',
  usage:
    'tendon serve MODEL [--port P] [--host H] [--body-limit BYTES] [--batch-rows N] [--wait-ms MS] [--queue-rows N] [--drift-k K] [--workers N|auto] [--no-watch] [--token-file FILE | --open]',
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
    const host = f.host ?? '127.0.0.1';
    if (f['token-file'] !== undefined && f.open) throw new UsageError('--open', 'cannot be combined with --token-file; choose one');
    const token = f['token-file'] !== undefined ? await readToken(f['token-file']) : null;
    if (!isLoopbackHost(host) && !token && !f.open) {
      throw new UsageError(
        '--host',
        `${host} is not a loopback address, so other machines could call the endpoint: give --token-file FILE (clients send Authorization: Bearer TOKEN), or --open to serve without a token`,
      );
    }
    const running = await startServer({
      modelPath,
      port,
      host,
      authorize: token ? bearerToken(token) : undefined,
      open: f.open ?? false,
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
        `routes: POST ${ROUTES.score} (${ACCEPTED_TYPES.join(', ')}), GET ${ROUTES.about}, ${ROUTES.alive}, ${ROUTES.ready}, ${ROUTES.counters}\n` +
        (token ? `clients must send the bearer token from ${f['token-file']}; ${ROUTES.alive} and ${ROUTES.ready} stay open\n` : '') +
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

/** The token from --token-file: the file's text without surrounding whitespace; it is never printed. */
async function readToken(path: string): Promise<string> {
  let text: string;
  try {
    text = await readFile(path, 'utf8');
  } catch (error) {
    const code = (error as { code?: unknown } | null)?.code;
    throw new UsageError('--token-file', `${path}: ${code === 'ENOENT' ? 'no such file' : code === 'EACCES' ? 'permission denied' : 'cannot be read'}`);
  }
  const token = text.trim();
  if (token === '') throw new UsageError('--token-file', `${path} is empty; put the token in it`);
  if (/\s/.test(token)) throw new UsageError('--token-file', `${path} holds more than one word; a bearer token is one word (no spaces or line breaks)`);
  return token;
}

/** '--workers auto' or a whole number >= 0 (0 also means one per core). */
function parseWorkers(text: string): WorkerCount {
  if (text === 'auto') return 'auto';
  if (!/^\d+$/.test(text)) throw new UsageError('--workers', `must be 'auto' or a whole number >= 0, got ${JSON.stringify(text)}`);
  return Number(text);
}
