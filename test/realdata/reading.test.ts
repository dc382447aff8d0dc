/**
 * Reading real files: the open datasets in test/fixtures/realdata (Debian package
 * python3-sklearn, authors in that folder's README.md) prepared the way users prepare them.
 */
import { describe, expect, it } from 'vitest';
import { loadDataset, type DatasetName } from './prepare.js';

describe('the shipped datasets parse to their documented shapes', () => {
  // Row, feature and class counts as REFERENCES.md and sklearn's descr/*.rst state them.
  const shapes: [DatasetName, number, number, number | null][] = [
    ['iris', 150, 4, 3],
    ['wine', 178, 13, 3],
    ['breast_cancer', 569, 30, 2],
    ['digits', 1797, 64, 10],
    ['diabetes', 442, 10, null],
    ['linnerud', 20, 3, null],
  ];
  it.each(shapes)('%s has %i rows of %i features', (name, rows, features, classes) => {
    const ds = loadDataset(name);
    expect(ds.x.length).toBe(rows);
    expect(ds.y.length).toBe(rows);
    expect(ds.x.every((r) => r.length === features && r.every(Number.isFinite))).toBe(true);
    expect(ds.classNames?.length ?? null).toBe(classes);
    if (classes !== null) expect(new Set(ds.y.map((t) => t[0])).size).toBe(classes);
  });
});
