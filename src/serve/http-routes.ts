/**
 * The endpoint's route table and how answers are written: which path takes which method, how a
 * URL maps to a route under the mount prefix, and JSON or text answers with their headers.
 * No model state here, so the handler and the tests can rely on it alone.
 */
import type { ServerResponse } from 'node:http';

export const ROUTES = {
  score: '/v1/score',
  explain: '/v1/explain',
  about: '/v1/about',
  alive: '/v1/alive',
  ready: '/v1/ready',
  counters: '/v1/counters',
} as const;

/** The one method each route answers. */
export const METHODS: Record<string, 'GET' | 'POST'> = {
  [ROUTES.score]: 'POST',
  [ROUTES.explain]: 'POST',
  [ROUTES.about]: 'GET',
  [ROUTES.alive]: 'GET',
  [ROUTES.ready]: 'GET',
  [ROUTES.counters]: 'GET',
};

/** The route path below `prefix`, or null when the URL is outside it or unreadable. */
export function pathOf(url: string | undefined, prefix: string): string | null {
  if (!url) return null;
  // A route spelled exactly (the common case) needs no URL parsing: it has nothing to normalise.
  const exact = !prefix ? url : url.startsWith(prefix + '/') ? url.slice(prefix.length) : null;
  if (exact !== null && Object.hasOwn(METHODS, exact)) return exact;
  let pathname: string;
  try {
    pathname = new URL(url, 'http://endpoint.invalid').pathname;
  } catch {
    return null;
  }
  if (!prefix) return pathname;
  if (pathname !== prefix && !pathname.startsWith(prefix + '/')) return null;
  return pathname.slice(prefix.length) || '/';
}

/** A client's path fit for a message or a log line: printable ASCII, at most 80 characters. */
export function printablePath(p: string): string {
  const one = p.replace(/[^\x20-\x7e]/g, '?');
  return one.length > 80 ? `${one.slice(0, 80)}...` : one;
}

export function send(res: ServerResponse, status: number, text: string, type: string, headers: Readonly<Record<string, string>> = {}): void {
  const body = Buffer.from(text, 'utf8');
  res.writeHead(status, { ...headers, 'content-type': type, 'content-length': String(body.length), 'cache-control': 'no-store' });
  res.end(body);
}

export function sendJson(res: ServerResponse, status: number, value: unknown, headers: Readonly<Record<string, string>> = {}): void {
  send(res, status, JSON.stringify(value) + '\n', 'application/json; charset=utf-8', headers);
}
