/** The bench targets are a table judged on the measured numbers (never on a row's note text). */
import { describe, expect, it } from 'vitest';
import { type Timing } from '../../src/bench/measure.js';
import { checkTargets, type SuiteResult, type SuiteRow } from '../../src/bench/suite.js';

const MID = 'mnist 784-512-256-10';

function row(fields: Partial<SuiteRow> & Pick<SuiteRow, 'section' | 'rowsPerSec'>): SuiteRow {
  return {
    network: MID,
    engine: 'fast',
    workers: 0,
    batch: 256,
    gflops: 0,
    p50Ms: 1,
    p99Ms: 1,
    rssMiB: 0,
    tensors: 0,
    vsPlainTfjs: Number.NaN,
    vsReference: Number.NaN,
    vsNumpy: Number.NaN,
    note: '',
    ...fields,
  };
}

const timing = (rowsPerSec: number, p50Ms: number): Timing => ({ rowsPerSec, p50Ms, p99Ms: p50Ms, calls: 10, totalMs: 1000 });

function measured(over: { pool2: number; leakGrowth: number; trainRate: number }): { rows: SuiteRow[]; baselines: SuiteResult['baselines'] } {
  const rows = [
    row({ section: 'engine', rowsPerSec: 60_000, vsNumpy: 0.6, vsPlainTfjs: 80 }),
    row({ section: 'engine', batch: 1, rowsPerSec: 5000, p50Ms: 0.2 }),
    row({ section: 'pool', workers: 1, rowsPerSec: 50_000 }),
    row({ section: 'pool', workers: 2, rowsPerSec: over.pool2 }),
    row({ section: 'train', network: 'train 784-256-10', batch: 64, rowsPerSec: over.trainRate }),
    // The note says "no change" whatever happened: only the number may decide.
    row({
      section: 'leak',
      network: 'tabular 7-32-3',
      engine: 'js',
      batch: 1,
      rowsPerSec: 1,
      tensorGrowth: over.leakGrowth,
      note: 'tensors 5->5, rss 90->90 MiB',
    }),
  ];
  const baselines = [
    { network: MID, batch: 1, plainTfjs: null, reference: null, numpy: timing(10_000, 0.15) },
    { network: MID, batch: 256, plainTfjs: null, reference: null, numpy: timing(100_000, 2) },
  ];
  return { rows, baselines };
}

const byName = (checks: ReturnType<typeof checkTargets>, part: string) => {
  const found = checks.find((c) => c.target.includes(part));
  if (!found) throw new Error(`no target like "${part}" in ${checks.map((c) => c.target).join(' | ')}`);
  return found;
};

describe('bench targets', () => {
  it('met and not met on the numbers, at the stated bounds', () => {
    const good = measured({ pool2: 95_000, leakGrowth: 0, trainRate: 12_000 });
    const ok = checkTargets(good.rows, good.baselines, 'fast');
    expect(byName(ok, 'one thread, >= 50% of numpy').met).toBe(true);
    expect(byName(ok, 'on 2 workers, >= 50% of numpy').met).toBe(true); // 95 000 / 100 000
    expect(byName(ok, 'one thread, >= 60x plain').met).toBe(true);
    expect(byName(ok, 'on 2 workers, >= 60x plain').met).toBe(true); // 95 000 / (60 000 / 80) = 126x
    expect(byName(ok, 'single-row p50 within 2x').met).toBe(true); // 0.2 / 0.15 = 1.33
    expect(byName(ok, 'two workers >= 1.8x').met).toBe(true); // 1.9x
    expect(byName(ok, 'training').met).toBe(true);
    expect(byName(ok, 'no tensor growth').met).toBe(true);

    const bad = measured({ pool2: 85_000, leakGrowth: 3, trainRate: 9_999 });
    const no = checkTargets(bad.rows, bad.baselines, 'fast');
    expect(byName(no, 'two workers >= 1.8x').met).toBe(false); // 1.7x
    expect(byName(no, 'two workers >= 1.8x').reached).toBe('1.70x');
    expect(byName(no, 'training').met).toBe(false);
    expect(byName(no, 'no tensor growth').met).toBe(false);
  });

  it('a target whose numbers were not measured is not judged', () => {
    const checks = checkTargets([], [], 'js');
    expect(checks.every((c) => c.met === null)).toBe(true);
    expect(byName(checks, 'no tensor growth').reached).toBe('not run');
    expect(byName(checks, 'training').reached).toBe('not measured');
    // Targets on the pool only appear when the pool ran.
    expect(checks.some((c) => c.target.includes('on 2 workers'))).toBe(false);
  });
});
