import { describe, it, expect } from 'vitest';
import { renderReport, type ReportEpoch } from '../../src/train/report.js';

const epochs: ReportEpoch[] = [0, 1, 2, 3].map((e) => ({
  epoch: e,
  trainLoss: 1 / (e + 1),
  holdoutLoss: 1.2 / (e + 1),
  trainAccuracy: 0.5 + e * 0.1,
  holdoutAccuracy: 0.45 + e * 0.1,
  gradientNorms: { 0: 1e-5 * (e + 1), 2: 0.5 },
}));

describe('training report (src/train/report.ts)', () => {
  it('is one self-contained SVG with loss, accuracy and log-scale gradient-norm panels', () => {
    const svg = renderReport('run <1>', epochs);
    expect(svg.startsWith('<?xml')).toBe(true);
    expect(svg).toContain('<svg xmlns="http://www.w3.org/2000/svg"');
    // Nothing fetched from elsewhere: the only URL is the SVG namespace.
    expect(svg.match(/https?:\/\/[^"\s]*/g)).toEqual(['http://www.w3.org/2000/svg']);
    expect(svg).not.toMatch(/<script|href=/);
    expect(svg).toContain('run &lt;1&gt;');
    for (const label of ['loss per epoch', 'accuracy per epoch', 'gradient norm per layer (log scale)', 'hold-out loss', 'layer 0', 'layer 2']) {
      expect(svg).toContain(label);
    }
    // One path per series: 2 loss, 2 accuracy, 2 layers.
    expect(svg.match(/<path /g)).toHaveLength(6);
    // Log axis labels span the layer norms: 1e-5 to 0.5.
    expect(svg).toContain('1.0e-5');
  });
  it('leaves out the accuracy panel for regression', () => {
    const svg = renderReport('r', epochs.map((e) => ({ ...e, trainAccuracy: null, holdoutAccuracy: null })));
    expect(svg).not.toContain('accuracy per epoch');
  });
});
