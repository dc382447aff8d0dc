import { mkdtempSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { writeModelFile } from '../../src/format/index.js';
import { SeededRng, type DenseLayer, type ModelDoc } from '../../src/model/index.js';
import { compareMatrices } from '../../src/check/index.js';
import { SHRINK_TOLERANCE, costVerdict, denseWeightBytes, foldModel, shrinkModel, storageCost } from '../../src/transform/index.js';
import { runCli } from '../cli/run-cli.js';
import { bakeryDoc, docOf, randomBatchNorm, randomDense, wideZscoreOf } from '../fixtures/models.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-shrink-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** Weight-dominated, so file sizes show the codec: 64-256-256-10. */
function wideDoc(): ModelDoc {
  const rng = new SeededRng(4);
  return docOf(64, [randomDense(rng, 64, 256, 'relu'), randomDense(rng, 256, 256, 'relu'), randomDense(rng, 256, 10, 'softmax')], wideZscoreOf(rng, 64));
}

function weights(doc: ModelDoc): DenseLayer[] {
  return doc.layers.filter((l): l is DenseLayer => l.kind === 'dense');
}

describe('shrinkModel', () => {
  it('f16 keeps each weight within half a binary16 ulp (IEEE 754-2008 binary16: 11 significant bits, relative step 2^-10)', () => {
    const doc = wideDoc();
    const small = shrinkModel(doc, 'f16');
    expect(small.storage).toBe('f16');
    expect(small.provenance.at(-1)?.action).toBe('shrunk to f16');
    weights(doc).forEach((layer, i) => {
      const after = weights(small)[i].weight;
      let changed = 0;
      let worst = 0;
      layer.weight.forEach((w, k) => {
        // Normal range: |error| <= 2^-11 |w|; below 2^-14 the subnormal step is 2^-24, half of it 2^-25.
        worst = Math.max(worst, Math.abs(after[k] - w) / Math.max(Math.abs(w) * 2 ** -11, 2 ** -25));
        if (after[k] !== w) changed++;
      });
      expect(worst).toBeLessThanOrEqual(1);
      expect(changed).toBeGreaterThan(layer.weight.length / 2);
    });
  });

  it('i8 keeps each weight within half a step of its column scale maxabs/127 (symmetric per-column quantisation, common practice)', () => {
    const doc = wideDoc();
    const small = shrinkModel(doc, 'i8');
    expect(small.provenance.at(-1)?.action).toBe('shrunk to i8');
    weights(doc).forEach((layer, i) => {
      const after = weights(small)[i].weight;
      const cols = layer.size;
      const maxAbs = new Float64Array(cols);
      layer.weight.forEach((w, k) => (maxAbs[k % cols] = Math.max(maxAbs[k % cols], Math.abs(w))));
      let worstError = 0;
      let worstOffGrid = 0;
      layer.weight.forEach((w, k) => {
        const step = maxAbs[k % cols] / 127;
        worstError = Math.max(worstError, Math.abs(after[k] - w) / step);
        // A value that is an integer number of steps (within float32 rounding of the scale).
        const q = after[k] / step;
        worstOffGrid = Math.max(worstOffGrid, Math.abs(q - Math.round(q)));
      });
      expect(worstError).toBeLessThanOrEqual(0.5 + 1e-6);
      expect(worstError).toBeGreaterThan(0.4);
      expect(worstOffGrid).toBeLessThan(1e-3);
    });
  });
});

describe('storageCost', () => {
  it('f16 halves and i8 quarters the dense weight bytes, measured in encoded files; costs stay within their tolerances', () => {
    const choices = storageCost(wideDoc());
    const by = Object.fromEntries(choices.map((c) => [c.codec, c]));
    // 64·256 + 256·256 + 256·10 = 84 480 weights: 4, 2 and 1 byte each (+ 522 column scales of 4 bytes for i8).
    expect(by.f32.weightBytes).toBe(84_480 * 4);
    expect(by.f16.weightBytes).toBe(84_480 * 2);
    expect(by.i8.weightBytes).toBe(84_480 + 522 * 4);
    // The files shrink by (nearly) the weight bytes saved: the rest of the file is shared.
    expect(by.f32.fileBytes - by.f16.fileBytes).toBeGreaterThan(0.99 * 84_480 * 2);
    expect(by.f16.fileBytes / by.f32.fileBytes).toBeLessThan(0.52);
    expect(by.i8.fileBytes / by.f32.fileBytes).toBeLessThan(0.28);
    expect(by.f32.cost.maxAbs).toBe(0);
    // Measured: f16 max abs 4.1e-4, i8 max abs 9.7e-3 on softmax outputs.
    expect(by.f16.cost.maxAbs).toBeLessThan(SHRINK_TOLERANCE.f16.abs);
    expect(by.f16.cost.maxAbs).toBeGreaterThan(0);
    expect(by.i8.cost.maxAbs).toBeLessThan(SHRINK_TOLERANCE.i8.abs);
    expect(by.i8.cost.maxAbs).toBeGreaterThan(by.f16.cost.maxAbs);
    expect(by.f16.cost.pass && by.i8.cost.pass).toBe(true);
    expect(by.i8.cost.topClassAgreement).toBeGreaterThan(0.95);
    expect(denseWeightBytes(wideDoc(), 'f16')).toBe(by.f16.weightBytes);
  });
});

describe('tendon shrink, fold, check --against, about --costs', () => {
  it('shrunken f16 and i8 files are smaller and pass check --against their parent; a damaged one fails with exit 1', async () => {
    const parent = join(dir, 'wide.tendon');
    await writeModelFile(parent, wideDoc());
    for (const codec of ['f16', 'i8']) {
      const out = join(dir, `wide-${codec}.tendon`);
      const shrunk = await runCli('shrink', parent, '--store', codec, '-o', out);
      expect(shrunk.code, shrunk.err).toBe(0);
      expect(statSync(out).size).toBeLessThan(statSync(parent).size * (codec === 'f16' ? 0.52 : 0.28));
      const judged = await runCli('check', out, '--against', parent);
      expect(judged.code, judged.out + judged.err).toBe(0);
      expect(judged.out).toMatch(new RegExp(`tolerance for ${codec} storage`));
      expect(judged.out).toMatch(/PASS/);
    }
    // A child whose output layer is off by 20 %: past even the i8 tolerance.
    const bad = shrinkModel(wideDoc(), 'i8');
    weights(bad)[2].weight.forEach((w, k, a) => (a[k] = w * 1.2));
    weights(bad)[2].bias.forEach((b, k, a) => (a[k] = b + 0.5));
    const badPath = join(dir, 'wide-bad.tendon');
    await writeModelFile(badPath, bad);
    const judged = await runCli('check', badPath, '--against', parent);
    expect(judged.code).toBe(1);
    expect(judged.out).toMatch(/FAIL/);
  });

  it('a folded file has fewer layers and passes check --against its parent at float32 tolerance', async () => {
    const parent = join(dir, 'bakery.tendon');
    await writeModelFile(parent, bakeryDoc(3));
    const out = join(dir, 'bakery-folded.tendon');
    const folded = await runCli('fold', parent, '-o', out);
    expect(folded.code, folded.err).toBe(0);
    expect(folded.out).toMatch(/\(3 layers\) into .* \(2 layers/);
    const judged = await runCli('check', out, '--against', parent, '--json');
    expect(judged.code).toBe(0);
    const report = JSON.parse(judged.out);
    expect(report.tolerance).toEqual({ abs: 1e-4, rel: 1e-4 });
    expect(report.maxAbs).toBeLessThan(1e-5);
    expect(foldModel(bakeryDoc(3)).doc.layers).toHaveLength(2);
  });

  it('about --costs lists the size and parity cost of each storage choice', async () => {
    const parent = join(dir, 'bakery-about.tendon');
    await writeModelFile(parent, bakeryDoc(3));
    const shown = await runCli('about', parent, '--costs');
    expect(shown.code).toBe(0);
    const lines = shown.out.split('\n');
    for (const codec of ['f32', 'f16', 'i8']) expect(lines.some((l) => l.startsWith(codec + ' '))).toBe(true);
    const json = await runCli('about', parent, '--costs', '--json');
    const facts = JSON.parse(json.out);
    expect(facts.storageCosts.map((c: { codec: string }) => c.codec)).toEqual(['f32', 'f16', 'i8']);
    expect(facts.storageCosts[0].fileBytes).toBe(statSync(parent).size);
  });

  it('about counts the weights training changes apart from the batchnorm running statistics it holds fixed', async () => {
    const rng = new SeededRng(5);
    const path = join(dir, 'with-batchnorm.tendon');
    await writeModelFile(path, docOf(2, [randomDense(rng, 2, 3, 'relu'), randomBatchNorm(rng, 3), randomDense(rng, 3, 1, 'sigmoid')]));
    const shown = await runCli('about', path);
    expect(shown.code).toBe(0);
    // Learned: 2x3 + 3, gamma 3 + beta 3, 3x1 + 1 = 19; fixed: running mean 3 + running variance 3 = 6.
    expect(shown.out).toMatch(/^19 weights to learn, 6 held fixed \(batchnorm running statistics\)$/m);
  });

  it('usage errors name the flag', async () => {
    const r = await runCli('shrink', join(dir, 'x.tendon'), '--store', 'f8', '-o', join(dir, 'y.tendon'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/--store: must be one of f32, f16, i8/);
    const missing = await runCli('fold', join(dir, 'nope.tendon'), '-o', join(dir, 'y.tendon'));
    expect(missing.code).toBe(2);
    expect(missing.err).toMatch(/nope\.tendon: cannot read the model file: no such file/);
  });
});

describe('the storage verdict follows the per-value rule (src/check/tolerance.ts: abs OR rel per value)', () => {
  // Hand-computed values against the i8 bound, abs 0.05 or rel 0.05.
  const i8 = SHRINK_TOLERANCE.i8;

  it('an output near 0 with a large relative error but a tiny absolute one is within; the verdict says how close the worst value came', () => {
    // Value 0: |0.0016 - 0.001| = 6e-4 <= 0.05 (rel 6e-4 / max(0.001, 1e-3) = 0.6, past 0.05); value 1: 1e-3 abs.
    const d = compareMatrices(Float64Array.of(0.0016, 10.001), Float64Array.of(0.001, 10), 2, i8);
    expect(d.maxRel).toBeCloseTo(0.6, 10);
    expect(d.pass).toBe(true);
    // Worst value: min(6e-4 / 0.05, 0.6 / 0.05) = 0.012; value 1: min(0.02, 0.002) = 0.002.
    expect(d.worstRatio).toBeCloseTo(0.012, 10);
    expect(
      costVerdict({
        rows: 1,
        maxAbs: d.maxAbs,
        maxRel: d.maxRel,
        worstRow: 0,
        worstCol: 0,
        topClassAgreement: null,
        worstRatio: d.worstRatio,
        tolerance: i8,
        pass: d.pass,
      }),
    ).toBe('within (worst value at 1% of its bound)');
  });

  it('a value past both bounds is BROKEN, with how far: |11 - 10| = 1 is 20x abs 0.05 and 0.1 / 0.05 = 2x rel, so 2x', () => {
    const d = compareMatrices(Float64Array.of(11), Float64Array.of(10), 1, i8);
    expect(d.pass).toBe(false);
    expect(d.worstRatio).toBeCloseTo(2, 10);
    expect(
      costVerdict({
        rows: 1,
        maxAbs: d.maxAbs,
        maxRel: d.maxRel,
        worstRow: 0,
        worstCol: 0,
        topClassAgreement: null,
        worstRatio: d.worstRatio,
        tolerance: i8,
        pass: d.pass,
      }),
    ).toBe('BROKEN (worst value 2.00x its bound)');
  });

  it('about --costs prints the bound beside each verdict and the rule under the table', async () => {
    const parent = join(dir, 'bakery-verdict.tendon');
    await writeModelFile(parent, bakeryDoc(3));
    const shown = await runCli('about', parent, '--costs');
    const i8Line = shown.out.split('\n').find((l) => l.startsWith('i8 '))!;
    expect(i8Line).toMatch(/abs 0\.05 or rel 0\.05\s+within \(worst value at \d+% of its bound\)/);
    expect(shown.out).toContain('a value is within when its abs error <= abs or its rel error <= rel');
  });
});
