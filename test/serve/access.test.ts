/**
 * Access to the endpoint: a bearer token (RFC 6750: 401 with WWW-Authenticate, error="invalid_token"
 * when a wrong one was sent), compared with crypto.timingSafeEqual; probes stay open; a host other
 * than loopback does not start without a token or an explicit --open.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { bakeryDoc } from '../fixtures/models.js';

// Wrap timingSafeEqual so the test can see the comparison go through it.
vi.mock('node:crypto', async (importOriginal) => {
  const original = await importOriginal<typeof import('node:crypto')>();
  return { ...original, timingSafeEqual: vi.fn(original.timingSafeEqual) };
});

import { timingSafeEqual } from 'node:crypto';
import { writeModelFile } from '../../src/format/index.js';
import { bearerToken, isLoopbackHost, startServer, type RunningServer } from '../../src/serve/http.js';
import { UsageError } from '../../src/errors.js';
import { runCli } from '../cli/run-cli.js';
import { call, parseExposition } from './helpers.js';

const TOKEN = 'q9Xv2-correct-horse';
const dir = mkdtempSync(join(tmpdir(), 'tendon-access-'));
const modelPath = join(dir, 'bakery.tendon');
let running: RunningServer;
const logs: string[] = [];
const ROW = [214, 231, 219, 44, 1.6, 790, 56];

beforeAll(async () => {
  await writeModelFile(modelPath, bakeryDoc(7));
  running = await startServer({ modelPath, port: 0, authorize: bearerToken(TOKEN), watch: false, log: (l) => logs.push(l) });
});

afterAll(async () => {
  await running.close();
  rmSync(dir, { recursive: true, force: true });
});

const score = (authorization?: string) =>
  call(`${running.url}/v1/score`, {
    method: 'POST',
    headers: { 'content-type': 'application/json', ...(authorization ? { authorization } : {}) },
    body: JSON.stringify({ rows: [ROW] }),
  });

describe('a bearer token', () => {
  it('missing: 401 with a WWW-Authenticate challenge', async () => {
    const a = await score();
    expect(a.status).toBe(401);
    expect(a.headers.get('www-authenticate')).toBe('Bearer realm="tendon"');
    expect(a.json.error.message).toBe('a valid bearer token is required (Authorization: Bearer TOKEN)');
  });

  it('wrong (also: one byte off, a prefix, another scheme): 401 with error="invalid_token"', async () => {
    for (const header of [`Bearer ${TOKEN.slice(0, -1)}x`, `Bearer ${TOKEN.slice(0, 5)}`, `Basic ${TOKEN}`, `Bearer ${TOKEN} extra`]) {
      const a = await score(header);
      expect(a.status).toBe(401);
      expect(a.headers.get('www-authenticate')).toBe('Bearer realm="tendon", error="invalid_token"');
    }
  });

  it('right: 200, and the comparison went through crypto.timingSafeEqual', async () => {
    vi.mocked(timingSafeEqual).mockClear();
    const a = await score(`Bearer ${TOKEN}`);
    expect(a.status).toBe(200);
    expect(a.json.outputs).toHaveLength(1);
    expect(vi.mocked(timingSafeEqual)).toHaveBeenCalledTimes(1);
    // The scheme is case-insensitive (RFC 6750 uses RFC 7235's auth-scheme).
    expect((await score(`bearer ${TOKEN}`)).status).toBe(200);
  });

  it('every route but the probes asks; alive and ready answer without a token', async () => {
    expect((await call(`${running.url}/v1/about`)).status).toBe(401);
    expect((await call(`${running.url}/v1/counters`)).status).toBe(401);
    expect((await call(`${running.url}/v1/alive`)).status).toBe(200);
    expect((await call(`${running.url}/v1/ready`)).status).toBe(200);
  });

  it('refusals are counted; the token never appears in the counters or the log', async () => {
    const text = (await call(`${running.url}/v1/counters`, { headers: { authorization: `Bearer ${TOKEN}` } })).text;
    const samples = parseExposition(text).samples;
    expect(samples.find((s) => s.name === 'tendon_errors_total' && s.labels.status === '401')!.value).toBeGreaterThanOrEqual(7);
    expect(text).not.toContain(TOKEN);
    expect(logs.join('\n')).not.toContain(TOKEN);
  });

  it("an authorize hook of the service's own is used as is; one that throws is a 401, logged without the header", async () => {
    const own = await startServer({ modelPath, port: 0, watch: false, log: (l) => logs.push(l), authorize: (req) => req.headers['x-team'] === 'bakery' });
    const throwing = await startServer({
      modelPath,
      port: 0,
      watch: false,
      log: (l) => logs.push(l),
      authorize: () => {
        throw new Error('directory down');
      },
    });
    try {
      expect((await call(`${own.url}/v1/about`, { headers: { 'x-team': 'bakery' } })).status).toBe(200);
      expect((await call(`${own.url}/v1/about`, { headers: { 'x-team': 'other' } })).status).toBe(401);
      expect((await call(`${throwing.url}/v1/about`)).status).toBe(401);
      expect(logs.some((l) => l.includes('authorize failed') && l.includes('directory down'))).toBe(true);
    } finally {
      await own.close();
      await throwing.close();
    }
  });
});

describe('listening beyond loopback', () => {
  it('loopback addresses are told from the rest (RFC 1122: 127.0.0.0/8; RFC 4291: ::1)', () => {
    for (const h of ['127.0.0.1', '127.1.2.3', 'localhost', '::1', '[::1]', '::ffff:127.0.0.1']) expect(isLoopbackHost(h)).toBe(true);
    for (const h of ['0.0.0.0', '::', '10.0.0.5', '192.168.1.2', 'example.com', '::ffff:10.0.0.1']) expect(isLoopbackHost(h)).toBe(false);
  });

  it('startServer refuses 0.0.0.0 with neither authorize nor open', async () => {
    await expect(startServer({ modelPath, host: '0.0.0.0', port: 0, watch: false, log: () => undefined })).rejects.toThrow(UsageError);
    await expect(startServer({ modelPath, host: '0.0.0.0', port: 0, watch: false, log: () => undefined })).rejects.toThrow(
      /0\.0\.0\.0 is not a loopback address/,
    );
  });

  it('tendon serve --host 0.0.0.0: exit 2 without --token-file or --open; a bad token file is a usage error too', async () => {
    const bare = await runCli('serve', modelPath, '--host', '0.0.0.0', '--port', '0');
    expect(bare.code).toBe(2);
    expect(bare.err).toMatch(/--host: 0\.0\.0\.0 is not a loopback address, .*--token-file FILE.*--open/);
    const empty = join(dir, 'empty-token');
    writeFileSync(empty, '\n');
    const emptyRun = await runCli('serve', modelPath, '--host', '0.0.0.0', '--port', '0', '--token-file', empty);
    expect(emptyRun.code).toBe(2);
    expect(emptyRun.err).toContain(`--token-file: ${empty} is empty`);
    const missing = await runCli('serve', modelPath, '--token-file', join(dir, 'nope'));
    expect(missing.code).toBe(2);
    expect(missing.err).toContain('no such file');
    const both = await runCli('serve', modelPath, '--token-file', empty, '--open');
    expect(both.code).toBe(2);
    expect(both.err).toContain('--open: cannot be combined with --token-file');
  });
});
