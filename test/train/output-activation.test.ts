/**
 * Which activation the loss sees: the fused softmax / sigmoid with cross-entropy gradient
 * (p - y) holds only when the last dense layer's activation is the model's output (common
 * practice). Dropout is the identity at inference, so it is looked through; anything else
 * after the last dense layer changes the output, so the loss must treat it as linear.
 */
import { describe, expect, it } from 'vitest';
import type { Layer } from '../../src/model/index.js';
import { SeededRng } from '../../src/model/index.js';
import { outputActivation } from '../../src/train/run-setup.js';
import { denseOf, docOf, dropoutOf, randomBatchNorm } from '../fixtures/models.js';

const dense = denseOf([1, 0, 0, 1], [0, 0], 'softmax');

describe('outputActivation', () => {
  it("is the last dense layer's activation when it ends the model or only dropout follows it", () => {
    expect(outputActivation(docOf(2, [dense]))).toBe('softmax');
    expect(outputActivation(docOf(2, [dense, dropoutOf(0.2)]))).toBe('softmax');
    expect(outputActivation(docOf(2, [denseOf([1, 1], [0], 'sigmoid'), dropoutOf(0.1), dropoutOf(0.1)]))).toBe('sigmoid');
  });

  it('is linear when a batch norm, or a layer kind it does not know, follows the last dense layer', () => {
    expect(outputActivation(docOf(2, [dense, randomBatchNorm(new SeededRng(1), 2)]))).toBe('linear');
    // A kind registered later (the catalogue walk-through adds one): never fused through.
    const later = { kind: 'clip', low: -1, high: 1 } as unknown as Layer;
    expect(outputActivation(docOf(2, [dense, later]))).toBe('linear');
    expect(outputActivation(docOf(2, [dense, dropoutOf(0.2), later]))).toBe('linear');
  });
});
