/**
 * The worker-thread side of the serving pool (built to dist/worker.js). Each worker opens the
 * model from the encoded bytes it is given, keeps one runner for its lifetime, and runs
 * the row shares the pool sends it. Inputs and outputs travel as transferred ArrayBuffers.
 *
 * The message shapes live in worker-protocol.ts, shared with src/serve/pool.ts.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { TendonError } from '../errors.js';
import { decodeModel } from '../format/index.js';
import { useEngine } from './backend.js';
import { openRunner, type Runner } from './runner.js';
import { isWorkerSetup, type FromWorker, type ToWorker } from './worker-protocol.js';

/** Exit code a worker uses when a test asks it to die; distinct from crashes and normal ends. */
const TEST_CRASH_EXIT = 70;

function describe(error: unknown): { message: string; typed: boolean } {
  if (error instanceof TendonError) return { message: error.message, typed: true };
  return { message: error instanceof Error ? error.message : String(error), typed: false };
}

async function main(): Promise<void> {
  const port = parentPort;
  if (!port) throw new Error('worker-entry runs only as a worker thread');
  const setup: unknown = workerData;
  if (!isWorkerSetup(setup)) throw new Error('worker-entry: workerData is not a pool worker setup');
  const send = (message: FromWorker, transfer: ArrayBuffer[] = []): void => port.postMessage(message, transfer);

  let crashNextRun = setup.crashEveryRun;
  let runner: Runner;
  try {
    const { doc } = decodeModel(setup.model, setup.source);
    const engine = setup.engine === 'fast' || setup.engine === 'int8' ? setup.engine : await useEngine(setup.engine);
    runner = openRunner(doc, engine, { source: setup.source });
  } catch (error) {
    send({ kind: 'open-failed', ...describe(error) });
    return;
  }

  port.on('message', (message: ToWorker) => {
    if (message.kind === 'crash-next-run') {
      crashNextRun = true;
      return;
    }
    if (crashNextRun) process.exit(TEST_CRASH_EXIT);
    try {
      const x = new Float32Array(message.data, 0, message.rows * runner.inputs);
      const y = runner.run(x, message.rows);
      // Always copy before transfer: the output is small (rows x outputs), and a runner that
      // reuses its output buffer must never have it detached under it.
      const data = y.slice().buffer;
      send({ kind: 'done', id: message.id, data }, [data]);
    } catch (error) {
      send({ kind: 'failed', id: message.id, ...describe(error) });
    }
  });
  send({ kind: 'ready', engine: runner.engine, inputs: runner.inputs, outputs: runner.outputs });
}

void main();
