/** Loopback clients and a Prometheus text parser for the serve suites. */
import { request } from 'node:http';

export interface Answer {
  readonly status: number;
  readonly headers: Headers;
  readonly text: string;
  /** Parsed JSON body (null when not JSON); tests check it field by field. */
  readonly json: any;
}

export async function call(url: string, init: RequestInit = {}): Promise<Answer> {
  const res = await fetch(url, init);
  const text = await res.text();
  let json: unknown = null;
  try {
    json = JSON.parse(text);
  } catch {
    json = null;
  }
  return { status: res.status, headers: res.headers, text, json };
}

export function postJson(url: string, body: unknown): Promise<Answer> {
  return call(url, { method: 'POST', headers: { 'content-type': 'application/json' }, body: typeof body === 'string' ? body : JSON.stringify(body) });
}

/** A raw request with node:http, for bodies fetch will not send (chunked, oversized, invalid UTF-8). */
export function rawRequest(
  url: string,
  options: { method: string; headers?: Record<string, string>; chunks: (Buffer | string)[] },
): Promise<{ status: number; headers: Record<string, string | string[] | undefined>; text: string }> {
  return new Promise((resolve, reject) => {
    const req = request(url, { method: options.method, headers: options.headers }, (res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (d: string) => (text += d));
      res.on('end', () => resolve({ status: res.statusCode ?? 0, headers: res.headers, text }));
      res.on('error', reject);
    });
    // The server may close while the body is still going out (413): the answer counts, not the write.
    req.on('error', reject);
    for (const c of options.chunks) req.write(c);
    req.end();
  });
}

export interface Sample {
  readonly name: string;
  readonly labels: Record<string, string>;
  readonly value: number;
}

/**
 * A line parser for the Prometheus text exposition format (version 0.0.4): `# HELP name text`,
 * `# TYPE name counter|gauge|summary|histogram|untyped`, and samples
 * `name{label="value",...} number` where names match [a-zA-Z_:][a-zA-Z0-9_:]*, label names
 * [a-zA-Z_][a-zA-Z0-9_]*, label values escape \\ \" \n, and numbers include NaN, +Inf, -Inf.
 * Throws on the first line that does not parse.
 */
export function parseExposition(text: string): { help: Map<string, string>; types: Map<string, string>; samples: Sample[] } {
  const help = new Map<string, string>();
  const types = new Map<string, string>();
  const samples: Sample[] = [];
  const NAME = '[a-zA-Z_:][a-zA-Z0-9_:]*';
  const lines = text.split('\n');
  if (lines.pop() !== '') throw new Error('the exposition must end with a line feed');
  for (const line of lines) {
    let m: RegExpMatchArray | null;
    if ((m = line.match(new RegExp(`^# HELP (${NAME}) (.*)$`)))) {
      help.set(m[1], m[2]);
    } else if ((m = line.match(new RegExp(`^# TYPE (${NAME}) (counter|gauge|summary|histogram|untyped)$`)))) {
      if (types.has(m[1])) throw new Error(`TYPE given twice for ${m[1]}`);
      types.set(m[1], m[2]);
    } else if ((m = line.match(new RegExp(`^(${NAME})(?:\\{(.*)\\})? (\\S+)$`)))) {
      const labels: Record<string, string> = {};
      let rest = m[2] ?? '';
      while (rest.length > 0) {
        const l = rest.match(/^([a-zA-Z_][a-zA-Z0-9_]*)="((?:[^"\\\n]|\\\\|\\"|\\n)*)"(,|$)/);
        if (!l) throw new Error(`bad labels in: ${line}`);
        labels[l[1]] = l[2].replace(/\\(["\\n])/g, (_, c: string) => (c === 'n' ? '\n' : c));
        rest = rest.slice(l[0].length);
      }
      const raw = m[3];
      const value = raw === '+Inf' ? Infinity : raw === '-Inf' ? -Infinity : raw === 'NaN' ? NaN : Number(raw);
      if (raw !== 'NaN' && Number.isNaN(value)) throw new Error(`bad value in: ${line}`);
      samples.push({ name: m[1], labels, value });
    } else {
      throw new Error(`line does not parse: ${JSON.stringify(line)}`);
    }
  }
  return { help, types, samples };
}

export function sleep(ms: number): Promise<void> {
  return new Promise((r) => setTimeout(r, ms));
}
