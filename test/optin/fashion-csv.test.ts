/**
 * Opt-in (TENDON_FASHION=1, the Debian package dataset-fashion-mnist, and a built dist/): the
 * Fashion-MNIST training set (Xiao, Rasul, Vollgraf 2017, arXiv:1708.07747) written as the
 * CSV users export (label, then 784 pixel columns; 60,000 rows, about 133 MB) and trained on
 * with `tendon tune` as a process. The rows need 60,000 x 784 x 4 bytes of float32 (188 MB);
 * the peak resident memory of the whole run must stay near that (it was 855 MB when the
 * reader kept a float64 table and copies of it).
 */
import { spawnSync } from 'node:child_process';
import { createWriteStream, existsSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { readModelFile } from '../../src/format/index.js';
import { readIdx } from '../../src/io/index.js';

const DIR = process.env.FASHION_MNIST_DIR ?? '/usr/share/datasets/fashion-mnist';
const CLI = join(import.meta.dirname, '..', '..', 'dist', 'cli.js');
const wanted = process.env.TENDON_FASHION === '1' && existsSync(`${DIR}/train-images-idx3-ubyte.gz`) && existsSync(CLI) && existsSync('/usr/bin/time');

describe.skipIf(!wanted)('Fashion-MNIST as a 133 MB CSV (opt-in: TENDON_FASHION=1)', () => {
  const dir = mkdtempSync(join(tmpdir(), 'tendon-fashion-csv-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('tune reads the training CSV once into float32: peak RSS under 2.25x the float32 rows, pixel means as in the IDX files', async () => {
    const [images, labels] = await Promise.all([readIdx(`${DIR}/train-images-idx3-ubyte.gz`), readIdx(`${DIR}/train-labels-idx1-ubyte.gz`)]);
    const rows = labels.dims[0];
    const csv = join(dir, 'fashion-train.csv');
    const out = createWriteStream(csv);
    const features = Array.from({ length: 784 }, (_, i) => `pixel${i}`);
    out.write(['label', ...features].join(',') + '\n');
    for (let r = 0; r < rows; r++) {
      const line = `${labels.data[r]},${Array.from(images.data.subarray(r * 784, (r + 1) * 784)).join(',')}\n`;
      if (!out.write(line)) await new Promise<void>((resolve) => out.once('drain', () => resolve()));
    }
    await new Promise<void>((resolve) => out.end(() => resolve()));
    const spec = join(dir, 'spec.json');
    writeFileSync(
      spec,
      JSON.stringify({
        inputs: 784,
        features,
        labels: ['T-shirt/top', 'Trouser', 'Pullover', 'Dress', 'Coat', 'Sandal', 'Shirt', 'Sneaker', 'Bag', 'Ankle boot'],
        normalise: { method: 'zscore' },
        layers: [
          { kind: 'dense', size: 16, activation: 'relu' },
          { kind: 'dense', size: 10, activation: 'softmax' },
        ],
      }),
    );
    // GNU time's %M: the peak resident set size in KiB.
    const run = spawnSync(
      '/usr/bin/time',
      [
        '-f',
        'peak-kib %M',
        process.execPath,
        CLI,
        'tune',
        spec,
        '--data',
        csv,
        '--target',
        'label',
        '-o',
        join(dir, 'f.tendon'),
        '--epochs',
        '1',
        '--log',
        'text',
      ],
      { encoding: 'utf8' },
    );
    expect(run.status).toBe(0);
    expect(run.stdout).toContain(`on ${rows.toLocaleString('en-US')} rows of`);
    const peak = Number(/peak-kib (\d+)/.exec(run.stderr)?.[1]) * 1024;
    const floats = rows * 784 * 4;
    expect(peak).toBeLessThan(2.25 * floats);
    // The z-score means fitted from the rows read equal the pixel means of the IDX images
    // (Welford 1962 agrees with the two-pass mean), so no cell was misread or dropped.
    const saved = await readModelFile(join(dir, 'f.tendon'));
    const norm = saved.doc.normalise;
    expect(norm?.method).toBe('zscore');
    const means = new Float64Array(784);
    for (let i = 0; i < images.data.length; i++) means[i % 784] += images.data[i] / rows;
    if (norm?.method === 'zscore') for (const k of [0, 100, 392, 783]) expect(norm.mean![k]).toBeCloseTo(means[k], 3);
  }, 1_800_000);
});
