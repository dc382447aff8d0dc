import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { DriftMonitor, FeatureMoments } from '../../src/drift/index.js';
import { writeModelFile } from '../../src/format/index.js';
import { SeededRng } from '../../src/model/index.js';
import { foldModel } from '../../src/transform/index.js';
import { runCli } from '../cli/run-cli.js';
import { bakeryDoc, dense, docOf, minmax, BAKERY_FEATURES } from '../transform/models.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-drift-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** rows x 7 bakery-like rows around the stored statistics, with `shift` sd added to one feature. */
function bakeryRows(rows: number, seed: number, shift: { feature: number; sd: number } | null = null): Float32Array {
  const doc = bakeryDoc(1);
  const norm = doc.normalise;
  if (norm?.method !== 'zscore' || !norm.mean || !norm.std) throw new Error('bakery doc has zscore statistics');
  const rng = new SeededRng(seed);
  const x = new Float32Array(rows * 7);
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < 7; c++) {
      const z = rng.normal() + (shift && shift.feature === c ? shift.sd : 0);
      x[r * 7 + c] = norm.mean[c] + norm.std[c] * Math.max(-5, Math.min(5, z));
    }
  }
  return x;
}

describe('FeatureMoments (Welford 1962; Knuth TAOCP vol. 2, 4.2.2)', () => {
  it('agrees with the two-pass mean and variance, even with a mean of 1e6 next to a spread of 1', () => {
    const rng = new SeededRng(2);
    const rows = 5000;
    const x = Float64Array.from({ length: rows * 2 }, (_, i) => (i % 2 === 0 ? 1e6 : -3) + rng.normal());
    const m = new FeatureMoments(2);
    // Streamed in uneven chunks: the result must not depend on the chunking.
    m.add(x.subarray(0, 2 * 1234), 1234);
    m.add(x.subarray(2 * 1234), rows - 1234);
    for (let c = 0; c < 2; c++) {
      let sum = 0;
      for (let r = 0; r < rows; r++) sum += x[r * 2 + c];
      const mean = sum / rows;
      let ss = 0;
      for (let r = 0; r < rows; r++) ss += (x[r * 2 + c] - mean) ** 2;
      expect(m.mean[c]).toBeCloseTo(mean, 8);
      expect(m.std(c)).toBeCloseTo(Math.sqrt(ss / rows), 8);
    }
    expect(m.count).toBe(rows);
  });
});

describe('DriftMonitor', () => {
  it('flags nothing on rows drawn from the stored statistics', () => {
    const drift = DriftMonitor.forModel(bakeryDoc(1))!;
    drift.add(bakeryRows(2000, 5), 2000);
    const report = drift.report();
    expect(report.rows).toBe(2000);
    expect(report.drifted).toEqual([]);
    // The mean of 2000 standard normal draws sits within about 3/sqrt(2000) = 0.07 sd of 0.
    for (const f of report.features) expect(f.meanShiftSd!).toBeLessThan(0.1);
  });

  it('flags the one feature whose mean moved 4 sd (past k = 3), and counts values beyond mean ± 6 sd', () => {
    const drift = DriftMonitor.forModel(bakeryDoc(1))!;
    drift.add(bakeryRows(1000, 6, { feature: 3, sd: 4 }), 1000);
    const outlier = bakeryRows(1, 7);
    outlier[5] = 800 + 7 * 45; // dough mass 7 sd above its stored mean
    drift.add(outlier, 1);
    const report = drift.report();
    expect(report.drifted).toEqual(['humidity_pct', 'dough_mass_g']);
    const humidity = report.features[3];
    expect(humidity.meanShiftSd!).toBeGreaterThan(3.75);
    expect(humidity.meanShiftSd!).toBeLessThan(4.2);
    expect(humidity.reason).toMatch(/mean moved (3\.[89]|4\.[01]) sd/);
    expect(report.features[5]).toMatchObject({ outOfRange: 1, drifted: true });
    expect(report.features[5].meanShiftSd!).toBeLessThan(3);
  });

  it('min-max models: values outside the seen range are flagged, values inside are not', () => {
    const rng = new SeededRng(3);
    const norm = minmax(rng, 3);
    if (norm.method !== 'minmax') throw new Error('minmax');
    const doc = docOf(3, [dense(rng, 3, 2, 'softmax')], norm);
    const drift = DriftMonitor.forModel(doc)!;
    const inside = Float32Array.of(norm.min![0], norm.max![1], (norm.min![2] + norm.max![2]) / 2);
    drift.add(inside, 1);
    expect(drift.report().drifted).toEqual([]);
    drift.add(Float32Array.of(norm.min![0] - 1, norm.max![1], norm.max![2] + 0.5), 1);
    const report = drift.report();
    expect(report.drifted).toEqual(['input_0', 'input_2']);
    expect(report.features[0].meanShiftSd).toBeNull();
  });

  it('a folded model keeps its statistics for drift; a model without statistics gets no monitor', () => {
    const folded = foldModel(bakeryDoc(1)).doc;
    expect(folded.normalise).toBeNull();
    const drift = DriftMonitor.forModel(folded)!;
    drift.add(bakeryRows(500, 8, { feature: 0, sd: 5 }), 500);
    expect(drift.report().drifted).toEqual(['zone1_temp_c']);
    const rng = new SeededRng(1);
    expect(DriftMonitor.forModel(docOf(2, [dense(rng, 2, 1, 'linear')]))).toBeNull();
  });
});

describe('tendon score --drift', () => {
  it('prints a per-feature drift table to stderr after scoring and keeps exit code 0', async () => {
    const model = join(dir, 'bakery.tendon');
    await writeModelFile(model, bakeryDoc(1));
    const x = bakeryRows(300, 9, { feature: 1, sd: 4 });
    const lines = [BAKERY_FEATURES.join(',')];
    for (let r = 0; r < 300; r++) lines.push(Array.from(x.subarray(r * 7, r * 7 + 7)).join(','));
    const input = join(dir, 'loaves.csv');
    writeFileSync(input, lines.join('\n') + '\n');
    const out = join(dir, 'scores.csv');
    const r = await runCli('score', model, '--input', input, '--output', out, '--drift');
    expect(r.code, r.err).toBe(0);
    expect(r.err).toMatch(/drift: 300 rows against the model's zscore statistics/);
    const zone2 = r.err.split('\n').find((l) => l.startsWith('zone2_temp_c'))!;
    expect(zone2).toMatch(/mean moved (3\.[89]|4\.[01]) sd/);
    expect(r.err).toMatch(/1 feature has drifted \(zone2_temp_c\)/);
    const plain = await runCli('score', model, '--input', input, '--output', out);
    expect(plain.err).not.toMatch(/drift:/);
  });
});
