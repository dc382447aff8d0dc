/**
 * `tendon demo`: the whole job on the invented bakery scenario. Train a model for the first
 * bakery, save and reopen it, score loaves, prove parity, then fine-tune it for a second bakery
 * whose sensors read differently, and show what each way of fine-tuning does to both sites.
 */
import { mkdir, mkdtemp, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { EngineChoice } from '../engine/index.js';
import { writeModelFile } from '../format/index.js';
import { SeededRng, type ModelDoc } from '../model/index.js';
import { openModel, type TendonModel } from '../tendon.js';
import { ATTRIBUTION_CAUTION, DEFAULT_STEPS, explainRows, namedBaseline, topFeatures } from '../explain/index.js';
import { referenceForward, referenceLogits, toMat64 } from '../reference/index.js';
import { CALIBRATION_CAUTION, expectedCalibrationError, scaledSoftmax } from '../train/calibration.js';
import { argmaxRows, accuracy, confusionMatrix } from '../train/metrics.js';
import { tune, type EpochRecord, type TuneResult } from '../train/tune.js';
import type { TuneRunOptions } from '../train/tune.js';
import { BAKERY_FEATURES, BAKERY_LABELS, bakeLoaves, FIRST_SITE, SECOND_SITE, type BakeryBatch } from './bakery.js';

export interface DemoOptions {
  readonly dir?: string;
  readonly seed: number;
  readonly engine: EngineChoice;
  readonly say: (line: string) => void;
  readonly signal?: AbortSignal;
}

export interface DemoOutcome {
  readonly dir: string;
  readonly firstSiteAccuracy: number;
  readonly parityPass: boolean;
  /** Accuracy of each model at each site's test rows. */
  readonly table: { model: string; first: number; second: number }[];
  /** Why one flagged loaf was flagged: its attributions (integrated gradients) and completeness gap. */
  readonly explained: { readonly loaf: number; readonly label: string; readonly top: { name: string; value: number }[]; readonly gap: number } | null;
  /** The temperature fitted at the first site and the calibration error on its new loaves before and after. */
  readonly calibration: { readonly temperature: number; readonly eceBefore: number; readonly eceAfter: number };
}

/** The model the demo starts from: seven raw sensor readings in, three bake classes out. */
export function bakerySpecDocument(): Omit<ModelDoc, 'layers'> & { layers: [] } {
  return {
    inputs: BAKERY_FEATURES.length,
    features: [...BAKERY_FEATURES],
    labels: [...BAKERY_LABELS],
    normalise: { method: 'zscore', mean: null, std: null, m2: null, count: 0 },
    layers: [],
    meta: { name: 'bakery-quality', description: 'oven-line sensors to bake quality (invented demo data)', created: new Date().toISOString(), extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

/** The loaves of both sites: training rows and new loaves to test on. */
interface DemoLoaves {
  readonly firstTrain: BakeryBatch;
  readonly firstTest: BakeryBatch;
  readonly secondTrain: BakeryBatch;
  readonly secondTest: BakeryBatch;
}

export async function runDemo(opts: DemoOptions): Promise<DemoOutcome> {
  const { say } = opts;
  const dir = opts.dir ?? (await mkdtemp(join(tmpdir(), 'tendon-demo-')));
  await mkdir(dir, { recursive: true });
  const rng = new SeededRng(opts.seed);
  const firstTrain = bakeLoaves(FIRST_SITE, 3000, rng);
  const firstTest = bakeLoaves(FIRST_SITE, 1500, rng);
  const secondTrain = bakeLoaves(SECOND_SITE, 400, rng);
  const secondTest = bakeLoaves(SECOND_SITE, 1500, rng);
  const loaves: DemoLoaves = { firstTrain, firstTest, secondTrain, secondTest };

  say(`tendon demo — an invented bakery (seed ${opts.seed}); files go to ${dir}`);
  await writeLoaves(join(dir, 'northgate-loaves.csv'), firstTrain);
  await writeLoaves(join(dir, 'riverside-loaves.csv'), secondTrain);
  say(`sensors: ${BAKERY_FEATURES.join(', ')}  ->  quality: ${BAKERY_LABELS.join(' / ')}`);
  say('');

  const fresh = await packFreshModel(dir, opts);
  const { trained, firstPath } = await trainFirstSite(fresh, firstTrain, dir, opts);

  // 3. Reopen from disk, score, prove parity.
  const model = await openModel(firstPath, { engine: opts.engine });
  try {
    const { firstAcc, parity } = scoreFirstSite(model, firstPath, firstTest, opts);
    const calibration = calibrationOnNewLoaves(trained.doc, firstTest);
    say(
      `   calibration: temperature ${calibration.temperature.toFixed(3)} fitted on the ${trained.calibration?.rows ?? 0} hold-out loaves; ` +
        `calibration error (ECE, 15 bins) on the ${firstTest.rows} new loaves ${calibration.eceBefore.toFixed(3)} before, ${calibration.eceAfter.toFixed(3)} after`,
    );
    say(`   (${CALIBRATION_CAUTION})`);
    const explained = explainFlagged(trained.doc, firstTest, say);

    const { table, kept } = await fineTuneSecondSite(model, trained.doc, firstPath, firstAcc, loaves, dir, opts);
    if (kept) await saveFinal(kept, dir, say);
    sayTryIt(dir, firstPath, say);
    return { dir, firstSiteAccuracy: firstAcc, parityPass: parity.pass, table, explained, calibration };
  } finally {
    model.dispose();
  }
}

/** 1. Pack a fresh model: weights seeded, normalisation left to be fitted from the first site's data. */
async function packFreshModel(dir: string, opts: DemoOptions): Promise<ModelDoc> {
  const { buildFromSpec } = await import('../spec/spec.js');
  const fresh = await buildFromSpec(
    {
      inputs: 7,
      features: [...BAKERY_FEATURES],
      labels: [...BAKERY_LABELS],
      name: 'bakery-quality',
      description: 'oven-line sensors to bake quality (invented demo data)',
      normalise: { method: 'zscore' },
      layers: [
        { kind: 'dense', size: 32, activation: 'relu' },
        { kind: 'dense', size: 16, activation: 'relu' },
        { kind: 'dense', size: 3, activation: 'softmax' },
      ],
    },
    join(dir, 'bakery-spec.json'),
    { seed: opts.seed, loadTensorFile: () => Promise.reject(new Error('the demo spec has no tensor files')) },
  );
  const freshPath = join(dir, 'bakery-fresh.tendon');
  await writeModelFile(freshPath, fresh);
  opts.say(`1. packed ${freshPath}: 7-32-16-3, ReLU hidden layers, softmax output, z-score inputs (to be fitted)`);
  return fresh;
}

/** 2. Train at the first site and save the model. */
async function trainFirstSite(fresh: ModelDoc, firstTrain: BakeryBatch, dir: string, opts: DemoOptions): Promise<{ trained: TuneResult; firstPath: string }> {
  const { say } = opts;
  const t0 = performance.now();
  const trained = await tune(
    fresh,
    asData(firstTrain),
    { ...common(opts.seed), epochs: 40, holdout: 0.2, stopAfter: 8, calibrate: true, origin: 'a fresh model built in memory by the demo' },
    { signal: opts.signal },
  );
  const seconds = (performance.now() - t0) / 1000;
  const firstPath = join(dir, 'bakery-northgate.tendon');
  await writeModelFile(firstPath, trained.doc);
  const last = trained.history[trained.history.length - 1];
  say(
    `2. trained at ${FIRST_SITE.name} on ${firstTrain.rows} loaves: ${trained.history.length} epochs in ${seconds.toFixed(1)} s ` +
      `(${Math.round(last.rowsPerSecond)} rows/s), best hold-out epoch ${trained.bestEpoch + 1}${trained.stoppedEarly ? ' (stopped early)' : ''}`,
  );
  for (const d of trained.diagnostics) say(`   note: ${d.message}`);
  return { trained, firstPath };
}

/** 3 and 4. The reopened model's accuracy on new loaves, five loaves scored, and parity with the reference. */
function scoreFirstSite(
  model: TendonModel,
  firstPath: string,
  firstTest: BakeryBatch,
  opts: DemoOptions,
): { firstAcc: number; parity: ReturnType<TendonModel['check']> } {
  const { say } = opts;
  const firstAcc = accuracyOf(model, firstTest);
  say(`3. reopened ${firstPath} (checksum ${model.checksum}) on the ${model.engine} engine`);
  say(`   held-out accuracy at ${FIRST_SITE.name}: ${pct(firstAcc)} on ${firstTest.rows} new loaves`);
  say(confusionText(model, firstTest));
  say('   five loaves scored with model.run (raw sensor readings in, probabilities out):');
  const sample = Array.from({ length: 5 }, (_, r) => Array.from(firstTest.x.subarray(r * 7, r * 7 + 7)));
  const scores = model.run(sample);
  sample.forEach((row, r) => {
    const best = scores[r].indexOf(Math.max(...scores[r]));
    say(
      `     ${row.map((v) => v.toFixed(1).padStart(6)).join(' ')}  ->  ${scores[r].map((p) => p.toFixed(3)).join(' ')}  ${BAKERY_LABELS[best].padEnd(5)} (true: ${BAKERY_LABELS[firstTest.y[r]]})`,
    );
  });
  const parity = model.check(undefined, opts.seed);
  say(
    `4. parity against the float64 reference on ${parity.output.rows} rows: max abs error ${parity.output.maxAbs.toExponential(2)}, ` +
      `max rel error ${parity.output.maxRel.toExponential(2)}, top class agrees on ${pct(parity.output.topClassAgreement ?? 1)} — ${parity.pass ? 'PASS' : 'FAIL'}`,
  );
  return { firstAcc, parity };
}

/** 5. The second site, whose sensors read differently: three ways of fine-tuning, each scored at both sites. */
async function fineTuneSecondSite(
  model: TendonModel,
  trainedDoc: ModelDoc,
  firstPath: string,
  firstAcc: number,
  loaves: DemoLoaves,
  dir: string,
  opts: DemoOptions,
): Promise<{ table: DemoOutcome['table']; kept: TuneResult | null }> {
  const { say } = opts;
  const { firstTrain, firstTest, secondTrain, secondTest } = loaves;
  const secondBefore = accuracyOf(model, secondTest);
  say('');
  say(`5. ${SECOND_SITE.name}: thermometers read ${SECOND_SITE.thermometerOffset} °C high, the humidity probe is scaled and shifted, the belt runs faster`);
  say(`   the ${FIRST_SITE.name} model scores ${pct(secondBefore)} there; fine-tuning on ${secondTrain.rows} local loaves, three ways:`);

  const table = [{ model: `${FIRST_SITE.name} model`, first: firstAcc, second: secondBefore }];
  const ways: { name: string; options: TuneRunOptions }[] = [
    { name: 'plain fine-tune', options: {} },
    { name: 'with anchor', options: { anchor: 0.05 } },
    { name: 'anchor + replay', options: { anchor: 0.05, replay: asData(firstTrain), replayPerBatch: 0.5 } },
  ];
  let kept: TuneResult | null = null;
  for (const way of ways) {
    const result = await tune(
      trainedDoc,
      asData(secondTrain),
      { ...common(opts.seed + 1), epochs: 30, lr: 0.003, ...way.options, parent: { checksum: model.checksum ?? '', source: firstPath } },
      { signal: opts.signal },
    );
    const tuned = await openModel(await saveTemp(dir, way.name, result.doc), { engine: opts.engine });
    table.push({ model: way.name, first: accuracyOf(tuned, firstTest), second: accuracyOf(tuned, secondTest) });
    tuned.dispose();
    kept = result;
  }
  sayComparison(table, firstAcc, secondBefore, say);
  return { table, kept };
}

/** The accuracy table and what it shows. */
function sayComparison(table: DemoOutcome['table'], firstAcc: number, secondBefore: number, say: (line: string) => void): void {
  say('');
  say(`   ${'model'.padEnd(22)} ${FIRST_SITE.name.padStart(10)} ${SECOND_SITE.name.padStart(10)}`);
  for (const row of table) say(`   ${row.model.padEnd(22)} ${pct(row.first).padStart(10)} ${pct(row.second).padStart(10)}`);
  const plain = table[1];
  const guarded = table[table.length - 1];
  say('');
  say(
    `   Plain fine-tuning lifts ${SECOND_SITE.name} by ${points(plain.second - secondBefore)} but forgets ${FIRST_SITE.name} (${points(plain.first - firstAcc)}); ` +
      `with the anchor and replay, ${SECOND_SITE.name} gains ${points(guarded.second - secondBefore)} while ${FIRST_SITE.name} moves ${points(guarded.first - firstAcc)}.`,
  );
  say('   (The same reading means a different bake at each site, so one model cannot be perfect at both.)');
}

/** 6. Save the last fine-tuned model; its provenance names the parent. */
async function saveFinal(kept: TuneResult, dir: string, say: (line: string) => void): Promise<void> {
  const finalPath = join(dir, 'bakery-riverside.tendon');
  const written = await writeModelFile(finalPath, kept.doc);
  const prov = kept.doc.provenance[kept.doc.provenance.length - 1];
  say('');
  say(
    `6. saved ${finalPath} (checksum ${written.checksum}); its provenance names the parent: ${prov ? `${prov.action} from ${prov.source}, checksum ${prov.checksum}` : '(none)'}`,
  );
}

/** The closing note and the commands to try next on the demo's files. */
function sayTryIt(dir: string, firstPath: string, say: (line: string) => void): void {
  say('');
  say('Invented data: these numbers show the runtime at work, not anything about real ovens.');
  say('Try it yourself:');
  say(`  npx tendon about ${firstPath}`);
  say(`  npx tendon check ${firstPath}`);
  say(
    `  npx tendon tune ${firstPath} --data ${join(dir, 'riverside-loaves.csv')} --target quality --anchor 0.05 --replay ${join(dir, 'northgate-loaves.csv')} --holdout 0.2 --epochs 20 -o ${join(dir, 'mine.tendon')}`,
  );
  say(`  npx tendon explain ${firstPath} --input ${join(dir, 'northgate-loaves.csv')} --output ${join(dir, 'why.csv')}`);
}

/** Plain words for the sensor columns, for the sentence that says why a loaf was flagged. */
const PLAIN_WORDS: Record<string, string> = {
  zone1_temp_c: 'zone 1 temperature',
  zone2_temp_c: 'zone 2 temperature',
  zone3_temp_c: 'zone 3 temperature',
  humidity_pct: 'humidity',
  belt_speed_m_min: 'belt speed',
  dough_mass_g: 'dough mass',
  proof_time_min: 'proof time',
};

/**
 * The first new loaf the model flags (not "good"), explained against the average loaf: the
 * three features that moved its score most, in plain words.
 */
function explainFlagged(doc: ModelDoc, b: BakeryBatch, say: (line: string) => void): DemoOutcome['explained'] {
  const probs = referenceForward(doc, toMat64(b.x, b.rows, 7)).y.data;
  const top = argmaxRows(probs, b.rows, 3);
  const loaf = top.findIndex((k) => BAKERY_LABELS[k] !== 'good');
  if (loaf < 0) return null;
  const row = b.x.subarray(loaf * 7, loaf * 7 + 7);
  const e = explainRows(doc, row, 1, { output: top[loaf], baseline: namedBaseline(doc, 'mean', 'baseline'), steps: DEFAULT_STEPS });
  const label = BAKERY_LABELS[top[loaf]];
  const best = topFeatures(doc, e.attributions, 0, 3);
  say('');
  say(
    `   why new loaf ${loaf + 1} was flagged "${label}" (p = ${e.score[0].toFixed(2)}, against ${e.baselineScore[0].toFixed(2)} for the average loaf): ` +
      best.map((f) => `${PLAIN_WORDS[f.name] ?? f.name} ${f.value >= 0 ? '+' : ''}${f.value.toFixed(2)}`).join(', '),
  );
  say(`   (integrated gradients; the seven shares sum to the difference to within ${(e.gaps[0] * 100).toFixed(2)}%; ${ATTRIBUTION_CAUTION})`);
  return { loaf, label, top: best, gap: e.gaps[0] };
}

/** Calibration error on new loaves without and with the fitted temperature (float64 path). */
function calibrationOnNewLoaves(doc: ModelDoc, b: BakeryBatch): DemoOutcome['calibration'] {
  const temperature = doc.temperature ?? 1;
  const z = referenceLogits(doc, b.x, b.rows);
  const labels = Int32Array.from(b.y);
  return {
    temperature,
    eceBefore: expectedCalibrationError(scaledSoftmax(z, b.rows, 3, 1), b.rows, 3, labels),
    eceAfter: expectedCalibrationError(scaledSoftmax(z, b.rows, 3, temperature), b.rows, 3, labels),
  };
}

function common(seed: number): TuneRunOptions {
  return { batch: 32, optimizer: 'adam', lr: 0.01, seed };
}

/** The site's loaves as CSV: the seven sensor columns and the quality label. */
async function writeLoaves(path: string, b: BakeryBatch): Promise<void> {
  const lines = [[...BAKERY_FEATURES, 'quality'].join(',')];
  for (let r = 0; r < b.rows; r++) {
    const row = Array.from(b.x.subarray(r * 7, r * 7 + 7), (v) => String(Number(v.toFixed(3))));
    lines.push([...row, BAKERY_LABELS[b.y[r]]].join(','));
  }
  await writeFile(path, lines.join('\n') + '\n');
}

function asData(b: BakeryBatch) {
  return { x: b.x, rows: b.rows, y: b.y };
}

async function saveTemp(dir: string, name: string, doc: ModelDoc): Promise<string> {
  const path = join(dir, `bakery-${name.replace(/[^a-z]+/g, '-')}.tendon`);
  await writeModelFile(path, doc);
  return path;
}

function accuracyOf(model: TendonModel, b: BakeryBatch): number {
  const out = model.run(b.x, b.rows);
  return accuracy(argmaxRows(out, b.rows, 3), b.y);
}

function confusionText(model: TendonModel, b: BakeryBatch): string {
  const m = confusionMatrix(argmaxRows(model.run(b.x, b.rows), b.rows, 3), b.y, 3);
  const head = `   ${'true \\ predicted'.padEnd(18)}${BAKERY_LABELS.map((l) => l.padStart(7)).join('')}`;
  const rows = m.map((row, i) => `   ${BAKERY_LABELS[i].padEnd(18)}${row.map((n) => String(n).padStart(7)).join('')}`);
  return [head, ...rows].join('\n');
}

/** A change in accuracy, in percentage points with a sign. */
function points(delta: number): string {
  return `${delta >= 0 ? '+' : ''}${(delta * 100).toFixed(1)} points`;
}

function pct(x: number): string {
  return `${(x * 100).toFixed(1)}%`;
}

export type { EpochRecord };
