/**
 * A parse thread (built to dist/parse-worker.js): turns request bodies into float32 rows off
 * the main thread, so with `--workers` the main thread only moves bytes.
 */
import { parentPort } from 'node:worker_threads';
import { parseRequestBody } from './http-parse.js';
import { HttpProblem } from './http-problem.js';
import type { ParseReply, ParseRequest } from './parse-protocol.js';

const port = parentPort;
if (!port) throw new Error('parse-worker runs only as a worker thread');
port.on('message', (message: ParseRequest) => {
  let reply: ParseReply;
  let transfer: ArrayBuffer[] = [];
  try {
    const { rows, x } = parseRequestBody(message.format, new Uint8Array(message.body), message.shape);
    // x owns its buffer unless it is a view; copy then, so the transfer moves only this array.
    const buffer = x.byteOffset === 0 && x.byteLength === x.buffer.byteLength ? (x.buffer as ArrayBuffer) : x.slice().buffer;
    reply = { id: message.id, ok: true, rows, x: buffer };
    transfer = [buffer];
  } catch (error) {
    const problem = error instanceof HttpProblem ? error : null;
    reply = {
      id: message.id,
      ok: false,
      status: problem?.status ?? 500,
      message: problem?.message ?? `parse failed: ${error instanceof Error ? error.message : String(error)}`,
      headers: problem?.headers ?? {},
    };
  }
  port.postMessage(reply, transfer);
});
