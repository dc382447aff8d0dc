import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { crc32 as zlibCrc32 } from 'node:zlib';
import { describe, expect, it } from 'vitest';
import { decodeModel } from '../../src/format/codec.js';

const specPath = fileURLToPath(new URL('../../formats/FORMAT.md', import.meta.url));

/** The bytes of the first hex dump in FORMAT.md's worked example. */
function workedExampleBytes(): Uint8Array {
  const spec = readFileSync(specPath, 'utf8');
  const section = spec.slice(spec.indexOf('## 8. Worked example'));
  const block = section.slice(section.indexOf('```') + 3, section.indexOf('```', section.indexOf('```') + 3));
  const hex = block
    .split('\n')
    .map((line) => line.match(/^[0-9a-f]{8}\s+((?:[0-9a-f]{2} ?)+)/)?.[1] ?? '')
    .join(' ')
    .trim()
    .split(/\s+/);
  return Uint8Array.from(hex, (h) => parseInt(h, 16));
}

describe('FORMAT.md worked example', () => {
  it('is 65 bytes whose header CRC is the CRC-32 node:zlib computes over the payload (independent implementation)', () => {
    const bytes = workedExampleBytes();
    expect(bytes.length).toBe(65);
    const view = new DataView(bytes.buffer);
    expect(view.getUint32(8, true)).toBe(49);
    expect(view.getUint32(12, true)).toBe(zlibCrc32(bytes.subarray(16)));
  });

  it('decodes to the model the spec describes: 2 inputs, dense 1 sigmoid, W = [0.5, -1], b = [0.25], name tiny', () => {
    const { doc, checksum, version } = decodeModel(workedExampleBytes(), 'FORMAT.md');
    expect(version).toEqual({ major: 1, minor: 0 });
    expect(checksum).toBe('5bf7abeb');
    expect(doc.inputs).toBe(2);
    expect(doc.meta.name).toBe('tiny');
    expect(doc.layers).toEqual([
      { kind: 'dense', size: 1, activation: 'sigmoid', alpha: 0, weight: new Float32Array([0.5, -1]), bias: new Float32Array([0.25]) },
    ]);
  });
});
