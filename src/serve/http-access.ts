/**
 * Who may use the endpoint: a bearer token compared in constant time, or the embedding
 * service's own `authorize(req)`. Liveness and readiness stay open so an orchestrator's probes
 * need no secret. The token is never written to a log or an answer.
 */
import { createHash, timingSafeEqual } from 'node:crypto';
import type { IncomingMessage } from 'node:http';
import { isIP } from 'node:net';

/** Decides whether a request may go on; a false (or a rejection) is answered 401. */
export type Authorize = (req: IncomingMessage) => boolean | Promise<boolean>;

/** RFC 6750: the challenge a 401 carries; error="invalid_token" when a token was sent but is wrong. */
export function bearerChallenge(req: IncomingMessage): string {
  return req.headers.authorization ? 'Bearer realm="tendon", error="invalid_token"' : 'Bearer realm="tendon"';
}

/**
 * Accepts requests carrying `Authorization: Bearer TOKEN`. Both sides are hashed to SHA-256
 * first, so timingSafeEqual compares equal lengths and the time taken says nothing about the
 * token's length or its first differing byte.
 * @example createRequestHandler({ model, authorize: bearerToken(secret) })
 * @throws RangeError for an empty token.
 */
export function bearerToken(token: string): Authorize {
  if (token.length === 0) throw new RangeError('bearerToken: the token is empty');
  const expected = digest(token);
  return (req) => {
    const header = req.headers.authorization ?? '';
    const match = /^Bearer[ \t]+(\S+)[ \t]*$/i.exec(header);
    return timingSafeEqual(digest(match ? match[1]! : ''), expected) && match !== null;
  };
}

function digest(text: string): Buffer {
  return createHash('sha256').update(text, 'utf8').digest();
}

/**
 * Whether a listen address only takes connections from this machine: localhost, 127.0.0.0/8,
 * ::1 (and 127.x mapped into IPv6). "0.0.0.0" and "::" listen everywhere, so they are not.
 * @example isLoopbackHost('127.0.0.1') // true
 */
export function isLoopbackHost(host: string): boolean {
  const h = host
    .trim()
    .toLowerCase()
    .replace(/^\[(.*)\]$/, '$1');
  if (h === 'localhost') return true;
  if (isIP(h) === 4) return h.startsWith('127.');
  if (isIP(h) === 6) return h === '::1' || /^::ffff:127\./.test(h) || /^(0{1,4}:){7}0{0,3}1$/.test(h);
  return false;
}
