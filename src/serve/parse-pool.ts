/**
 * Threads that parse request bodies (JSON and CSV) into float32 rows, so that with `--workers`
 * the main thread reads bytes, hands them over and writes answers. A thread that dies fails
 * the requests it held (500) and is replaced; the others go on.
 */
import { existsSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Worker } from 'node:worker_threads';
import { RuntimeFailure } from '../errors.js';
import type { BodyFormat } from './http-formats.js';
import { HttpProblem } from './http-problem.js';
import type { ScoreShape } from './http-rows.js';
import type { ParseReply, ParseRequest } from './parse-protocol.js';

interface Waiting {
  readonly resolve: (parsed: { rows: number; x: Float32Array }) => void;
  readonly reject: (cause: unknown) => void;
}

interface Thread {
  readonly worker: Worker;
  readonly waiting: Map<number, Waiting>;
}

/**
 * The parse thread script: as given, else parse-worker.js beside the engine's worker script
 * (dist/), else beside this module in the build. Null when there is none to be found (code run
 * from the TypeScript sources), and then bodies are parsed on the main thread.
 */
export function parseWorkerScript(given: string | URL | undefined, engineWorkerScript: string | URL | undefined): string | URL | null {
  if (given !== undefined) return given;
  const here: string | undefined = import.meta.url;
  const beside = engineWorkerScript !== undefined ? engineWorkerScript : here ? new URL('./parse-worker.js', here) : null;
  if (beside === null) return null;
  const path = beside instanceof URL ? fileURLToPath(beside) : beside;
  const script = join(dirname(path), 'parse-worker.js');
  return existsSync(script) ? script : null;
}

/**
 * @example
 * const parsers = new ParsePool(2, parseWorkerScript(undefined));
 * const { rows, x } = await parsers.parse('json', body, { inputs: 7, features: null, maxRows: 100 });
 * await parsers.close();
 */
export class ParsePool {
  private readonly threads: Thread[] = [];
  private nextId = 1;
  private closing = false;
  private startFailure: string | null = null;

  constructor(
    size: number,
    private readonly script: string | URL,
  ) {
    for (let i = 0; i < size; i++) this.threads.push(this.start());
  }

  /**
   * Parse one body on the least busy thread; rejects with the parser's HttpProblem. With `owned`
   * the caller gives `bytes` up, and a buffer that is wholly the body's moves to the thread uncopied.
   */
  parse(format: BodyFormat, bytes: Uint8Array, shape: ScoreShape, options: { readonly owned?: boolean } = {}): Promise<{ rows: number; x: Float32Array }> {
    if (this.closing) return Promise.reject(new RuntimeFailure('parse pool is closed'));
    if (this.threads.length === 0) return Promise.reject(new RuntimeFailure(`no parse thread could start: ${this.startFailure ?? 'unknown cause'}`));
    let thread = this.threads[0]!;
    for (const t of this.threads) if (t.waiting.size < thread.waiting.size) thread = t;
    // A copy the thread may own, unless the bytes are given up and fill their buffer: Node pools
    // small buffers, and transferring a shared one would detach the others.
    const whole = options.owned && bytes.byteOffset === 0 && bytes.byteLength === bytes.buffer.byteLength && bytes.buffer instanceof ArrayBuffer;
    const body = whole ? (bytes.buffer as ArrayBuffer) : new Uint8Array(bytes).buffer;
    const id = this.nextId++;
    const message: ParseRequest = { id, format, shape: { inputs: shape.inputs, features: shape.features, maxRows: shape.maxRows }, body };
    return new Promise((resolve, reject) => {
      thread.waiting.set(id, { resolve, reject });
      thread.worker.postMessage(message, [body]);
    });
  }

  async close(): Promise<void> {
    this.closing = true;
    await Promise.all(this.threads.map((t) => t.worker.terminate()));
  }

  private start(): Thread {
    const worker = new Worker(this.script);
    // The server keeps the process alive; idle parse threads alone must not.
    worker.unref();
    const thread: Thread = { worker, waiting: new Map() };
    worker.on('message', (reply: ParseReply) => {
      const waiting = thread.waiting.get(reply.id);
      if (!waiting) return;
      thread.waiting.delete(reply.id);
      if (reply.ok) waiting.resolve({ rows: reply.rows, x: new Float32Array(reply.x) });
      else waiting.reject(new HttpProblem(reply.status, reply.message, reply.headers));
    });
    let online = false;
    worker.once('online', () => (online = true));
    worker.on('error', (error) => {
      if (!online) this.startFailure = error instanceof Error ? error.message : String(error);
    });
    worker.once('exit', (code) => {
      const orphans = [...thread.waiting.values()];
      thread.waiting.clear();
      for (const w of orphans) w.reject(new RuntimeFailure(`a parse thread exited with code ${code} while parsing this request`));
      if (this.closing) return;
      const index = this.threads.indexOf(thread);
      if (index < 0) return;
      // One that never started is not replaced (no respawn loop over a missing script).
      if (online) this.threads[index] = this.start();
      else this.threads.splice(index, 1);
    });
    return thread;
  }
}
