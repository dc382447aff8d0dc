// Opt-in benchmark: train a dense network on Fashion-MNIST (Xiao, Rasul, Vollgraf 2017,
// arXiv:1708.07747) read from the Debian package `dataset-fashion-mnist` (IDX files), and
// report epoch time, training rows/s and test accuracy, with the dataset README's figure for a
// comparable MLP beside it.
//
//   sudo apt-get install dataset-fashion-mnist
//   npm run build && node bench/fashion.mjs [--epochs 5] [--engine wasm|js] [--rows 60000]
import { appendFile } from 'node:fs/promises';
import { existsSync } from 'node:fs';
import os from 'node:os';
import { buildFromSpec, modelFromDocument, readIdx, tune, useEngine } from '../dist/index.js';

const DIR = process.env.FASHION_MNIST_DIR ?? '/usr/share/datasets/fashion-mnist';
// The dataset's README benchmark table lists "MLP 256-128-100, no preprocessing: 0.8833" test accuracy.
const README_MLP_ACCURACY = 0.8833;

const args = Object.fromEntries(process.argv.slice(2).reduce((pairs, a, i, all) => (a.startsWith('--') ? [...pairs, [a.slice(2), all[i + 1]]] : pairs), []));
const epochs = Number(args.epochs ?? 5);
const engineAsked = args.engine ?? 'auto';
const maxRows = Number(args.rows ?? 60000);

const files = ['train-images-idx3-ubyte.gz', 'train-labels-idx1-ubyte.gz', 't10k-images-idx3-ubyte.gz', 't10k-labels-idx1-ubyte.gz'].map((f) => `${DIR}/${f}`);
if (!files.every(existsSync)) {
  console.log(`Fashion-MNIST not found in ${DIR}; install the Debian package dataset-fashion-mnist (or set FASHION_MNIST_DIR). Skipped.`);
  process.exit(0);
}

const [trainImages, trainLabels, testImages, testLabels] = await Promise.all(files.map((f) => readIdx(f)));
const asRows = (images, limit) => {
  const rows = Math.min(images.dims[0], limit);
  const x = new Float32Array(rows * 784);
  for (let i = 0; i < x.length; i++) x[i] = images.data[i];
  return { x, rows };
};
const train = asRows(trainImages, maxRows);
const test = asRows(testImages, 10000);
const trainY = Int32Array.from(trainLabels.data.subarray(0, train.rows));
const testY = Int32Array.from(testLabels.data.subarray(0, test.rows));

const engine = await useEngine(engineAsked);
const spec = {
  inputs: 784,
  labels: ['T-shirt/top', 'Trouser', 'Pullover', 'Dress', 'Coat', 'Sandal', 'Shirt', 'Sneaker', 'Bag', 'Ankle boot'],
  // Pixels 0..255 scaled onto [0, 1] inside the model; the statistics are fitted on the first tune.
  normalise: { method: 'minmax' },
  layers: [
    { kind: 'dense', size: 256, activation: 'relu' },
    { kind: 'dense', size: 128, activation: 'relu' },
    { kind: 'dense', size: 10, activation: 'softmax' },
  ],
};
const doc = await buildFromSpec(spec, 'fashion-spec.json', { seed: 1, loadTensorFile: () => Promise.reject(new Error('no files')) });

console.log(`Fashion-MNIST: ${train.rows} training rows, ${test.rows} test rows; 784-256-128-10 ReLU, Adam lr 1e-3, batch 64, ${epochs} epochs`);
const epochTimes = [];
let last = performance.now();
const result = await tune(
  doc,
  { x: train.x, rows: train.rows, y: trainY },
  { epochs, batch: 64, lr: 0.001, optimizer: 'adam', seed: 1, holdoutData: { x: test.x, rows: test.rows, y: testY } },
  {
    onEpoch: (e) => {
      const now = performance.now();
      epochTimes.push((now - last) / 1000);
      last = now;
      console.log(
        `  epoch ${e.epoch + 1}: ${epochTimes.at(-1).toFixed(1)} s, ${Math.round(e.rowsPerSecond)} rows/s, train loss ${e.train.loss.toFixed(4)}, test accuracy ${(e.holdout.accuracy * 100).toFixed(2)}%`,
      );
    },
  },
);
const trainedOn = result.path === 'fast' ? 'the fast kernel' : `the tfjs ${engine} engine`;
console.log(`trained on ${trainedOn}`);
const model = await modelFromDocument(result.doc);
const out = model.run(test.x, test.rows);
let correct = 0;
for (let r = 0; r < test.rows; r++) {
  let best = 0;
  for (let c = 1; c < 10; c++) if (out[r * 10 + c] > out[r * 10 + best]) best = c;
  if (best === testY[r]) correct++;
}
model.dispose();
const accuracy = correct / test.rows;
const meanEpoch = epochTimes.reduce((a, b) => a + b, 0) / epochTimes.length;
const rowsPerSecond = result.history.reduce((a, e) => a + e.rowsPerSecond, 0) / result.history.length;
console.log('');
console.log(`| epochs | mean epoch s | train rows/s | test accuracy | README MLP 256-128-100 |`);
console.log(
  `| ${epochs} | ${meanEpoch.toFixed(1)} | ${Math.round(rowsPerSecond)} | ${(accuracy * 100).toFixed(2)}% | ${(README_MLP_ACCURACY * 100).toFixed(2)}% |`,
);

const cpu = os.cpus()[0]?.model ?? 'unknown CPU';
await appendFile(
  new URL('./RESULTS.md', import.meta.url),
  `\n### Fashion-MNIST training, ${new Date().toISOString().slice(0, 10)}\n` +
    `Machine: ${cpu}, ${os.cpus().length} cores, Node ${process.version}, trained on ${trainedOn}. 784-256-128-10 ReLU, Adam 1e-3, batch 64, ${train.rows} rows.\n\n` +
    `| epochs | mean epoch s | train rows/s | test accuracy | dataset README, MLP 256-128-100 |\n|---|---|---|---|---|\n` +
    `| ${epochs} | ${meanEpoch.toFixed(1)} | ${Math.round(rowsPerSecond)} | ${(accuracy * 100).toFixed(2)}% | ${(README_MLP_ACCURACY * 100).toFixed(2)}% |\n`,
);
