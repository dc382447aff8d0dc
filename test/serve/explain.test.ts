/**
 * POST /v1/explain on loopback: attributions by feature name for rows in the score body's
 * shapes, bounded like score. Completeness of integrated gradients (Sundararajan, Taly and Yan
 * 2017): each row's attributions sum to score - baselineScore.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { BAKERY_FEATURES, BAKERY_LABELS, bakeryDoc } from '../fixtures/models.js';
import { writeModelFile } from '../../src/format/index.js';
import { startServer, type RunningServer } from '../../src/serve/http.js';
import { postJson } from './helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-explain-http-'));
let running: RunningServer;
const LOAVES = [
  [214, 231, 219, 44, 1.6, 790, 56],
  [230, 245, 236, 38, 1.45, 760, 64],
];

beforeAll(async () => {
  const path = join(dir, 'bakery.tendon');
  await writeModelFile(path, { ...bakeryDoc(7), temperature: 1.5 });
  running = await startServer({ modelPath: path, port: 0, bodyLimitBytes: 4096, maxExplainRows: 3, log: () => undefined });
});

afterAll(async () => {
  await running.close();
  rmSync(dir, { recursive: true, force: true });
});

const url = (p: string) => `${running.url}${p}`;

describe('POST /v1/explain', () => {
  it('answers attributions by feature name that sum to score - baselineScore, with the caution', async () => {
    const a = await postJson(url('/v1/explain?steps=32'), { rows: LOAVES });
    expect(a.status).toBe(200);
    expect(a.json.attributions).toHaveLength(2);
    expect(Object.keys(a.json.attributions[0])).toEqual(BAKERY_FEATURES);
    for (let r = 0; r < 2; r++) {
      const values = Object.values(a.json.attributions[r] as Record<string, number>);
      const sum = values.reduce((s, v) => s + v, 0);
      const size = values.reduce((s, v) => s + Math.abs(v), 0);
      const delta = a.json.score[r] - a.json.baselineScore[r];
      expect(Math.abs(sum - delta)).toBeLessThanOrEqual(0.01 * Math.max(Math.abs(delta), size));
      expect(BAKERY_LABELS).toContain(a.json.label[r]);
    }
    expect(a.json.caution).toContain('not causes in the world');
  });

  it('takes rows keyed by feature name and a class by label', async () => {
    const row = Object.fromEntries(BAKERY_FEATURES.map((f, i) => [f, LOAVES[0][i]]));
    const a = await postJson(url('/v1/explain?class=over&baseline=zeros'), { rows: [row] });
    expect(a.status).toBe(200);
    expect(a.json.class).toEqual([2]);
    expect(a.json.label).toEqual(['over']);
  });

  it.each([
    ['/v1/explain?class=burnt', 400, /class: the model has no output "burnt"/],
    ['/v1/explain?steps=0', 400, /steps: must be a whole number from 1 to 10000/],
    ['/v1/explain?steps=5000', 400, /steps: at most 1024 on the endpoint/],
    ['/v1/explain?baseline=median', 400, /baseline: expected mean or zeros/],
  ])('%s -> %i', async (path, status, message) => {
    const a = await postJson(url(path), { rows: LOAVES });
    expect(a.status).toBe(status);
    expect(a.json.error.message).toMatch(message);
  });

  it('bounds rows per request like score (413) and refuses a row of the wrong width (400)', async () => {
    const many = await postJson(url('/v1/explain'), { rows: [...LOAVES, ...LOAVES] });
    expect(many.status).toBe(413);
    expect(many.json.error.message).toMatch(/4 rows pass the limit of 3/);
    const narrow = await postJson(url('/v1/explain'), { rows: [[1, 2]] });
    expect(narrow.status).toBe(400);
    expect(narrow.json.error.message).toMatch(/rows\[0\]: expected 7 numbers, got 2/);
  });
});
