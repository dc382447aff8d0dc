/** Reading a request body with a size limit that stops reading as soon as it is passed. */
import type { IncomingMessage } from 'node:http';
import { HttpProblem } from './http-problem.js';

/**
 * The whole body of `req`, or an HttpProblem 413 as soon as it would pass `limitBytes`
 * (a declared Content-Length over the limit is refused before a byte is read).
 * @example const bytes = await readBody(req, 1 << 20);
 */
export function readBody(req: IncomingMessage, limitBytes: number): Promise<Buffer> {
  const tooLarge = (what: string) => new HttpProblem(413, `request body ${what} passes the limit of ${limitBytes} bytes`, { connection: 'close' });
  const declared = Number(req.headers['content-length']);
  if (Number.isFinite(declared) && declared > limitBytes) {
    stopReading(req);
    return Promise.reject(tooLarge(`of ${declared} bytes (Content-Length)`));
  }
  return new Promise((resolve, reject) => {
    const parts: Buffer[] = [];
    let size = 0;
    let done = false;
    const finish = (error: Error | null) => {
      if (done) return;
      done = true;
      req.off('data', onData);
      req.off('end', onEnd);
      req.off('error', onError);
      req.off('aborted', onAborted);
      if (error) reject(error);
      else resolve(Buffer.concat(parts, size));
    };
    const onData = (chunk: Buffer) => {
      size += chunk.length;
      if (size > limitBytes) {
        stopReading(req);
        finish(tooLarge(`of more than ${size - chunk.length} bytes`));
        return;
      }
      parts.push(chunk);
    };
    const onEnd = () => finish(null);
    const onError = (error: Error) => finish(new HttpProblem(400, `request body could not be read: ${error.message}`));
    const onAborted = () => finish(new HttpProblem(400, 'the client aborted the request'));
    req.on('data', onData);
    req.on('end', onEnd);
    req.on('error', onError);
    req.on('aborted', onAborted);
  });
}

/** Stop taking the body: no more buffering; the answer carries Connection: close so the socket ends after it. */
function stopReading(req: IncomingMessage): void {
  req.pause();
  // An error on a stream nobody reads any more must not become an unhandled 'error' event.
  req.on('error', () => undefined);
}
