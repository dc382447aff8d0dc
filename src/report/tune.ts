/**
 * The tune report: the curves alone as an SVG file, or the whole run as one HTML page (loss and
 * accuracy per epoch with hold-out, the confusion matrix, per-class precision and recall,
 * gradient norms per layer, dead ReLU units, and every finding in plain words with what to do).
 * Numbers in, markup out: the CLI turns a tune result into these plain records.
 */
import { barChart, heatMap, lineChart, svgDocument, type LineSeries } from './charts.js';
import { findingsList, htmlPage, htmlTable, para, type Finding, type PageSection } from './page.js';
import { valueText } from './scale.js';

export interface TuneEpochView {
  /** 0-based; shown 1-based. */
  readonly epoch: number;
  readonly trainLoss: number;
  readonly holdoutLoss: number | null;
  readonly trainAccuracy: number | null;
  readonly holdoutAccuracy: number | null;
  /** Mean gradient norm per layer index (layers with parameters). */
  readonly gradientNorms: Readonly<Record<number, number>>;
  /** Share of never-firing units per hidden ReLU layer. */
  readonly deadRelu?: Readonly<Record<number, number>>;
  /** Confusion counts (row = true class, column = predicted); hold-out when there is one. */
  readonly confusion?: readonly (readonly number[])[] | null;
}

export interface TuneDiagnosticView {
  readonly code: string;
  readonly message: string;
  readonly hint: string;
  readonly layer?: number;
  readonly epoch?: number;
}

export interface TuneReportInput {
  readonly title: string;
  readonly epochs: readonly TuneEpochView[];
  /** 0-based epoch whose weights were saved. */
  readonly bestEpoch: number;
  readonly stoppedEarly?: boolean;
  readonly diagnostics?: readonly TuneDiagnosticView[];
  /** Output labels of a classifier, when the model has them. */
  readonly classLabels?: readonly string[] | null;
  /** How to name layer i ("layer 0 dense relu 16"). Default "layer i". */
  readonly layerNames?: Readonly<Record<number, string>>;
  readonly facts?: readonly (readonly [string, string])[];
  /** Lines said of the whole run beside the curves (a calibration result, for one). */
  readonly notes?: readonly string[];
}

const layerName = (input: Pick<TuneReportInput, 'layerNames'>, l: number) => input.layerNames?.[l] ?? `layer ${l}`;

function hasHoldout(epochs: readonly TuneEpochView[]): boolean {
  return epochs.some((e) => e.holdoutLoss !== null);
}

function lossChart(epochs: readonly TuneEpochView[]): string {
  const series: LineSeries[] = [{ label: 'training', points: epochs.map((e) => [e.epoch + 1, e.trainLoss]) }];
  if (hasHoldout(epochs)) series.push({ label: 'hold-out', points: epochs.map((e) => [e.epoch + 1, e.holdoutLoss ?? Number.NaN]) });
  return lineChart({ title: 'Loss per epoch', xTitle: 'epoch', yTitle: 'loss', series, integerX: true });
}

function accuracyChart(epochs: readonly TuneEpochView[]): string | null {
  if (!epochs.some((e) => e.trainAccuracy !== null)) return null;
  const series: LineSeries[] = [{ label: 'training', points: epochs.map((e) => [e.epoch + 1, e.trainAccuracy ?? Number.NaN]) }];
  if (epochs.some((e) => e.holdoutAccuracy !== null))
    series.push({ label: 'hold-out', points: epochs.map((e) => [e.epoch + 1, e.holdoutAccuracy ?? Number.NaN]) });
  return lineChart({ title: 'Accuracy per epoch', xTitle: 'epoch', yTitle: 'accuracy', series, percent: true, integerX: true });
}

function layersOf(epochs: readonly TuneEpochView[], pick: (e: TuneEpochView) => Readonly<Record<number, number>> | undefined): number[] {
  return [...new Set(epochs.flatMap((e) => Object.keys(pick(e) ?? {}).map(Number)))].sort((a, b) => a - b);
}

function perLayerSeries(
  input: Pick<TuneReportInput, 'epochs' | 'layerNames'>,
  pick: (e: TuneEpochView) => Readonly<Record<number, number>> | undefined,
): LineSeries[] {
  return layersOf(input.epochs, pick).map((l) => ({
    label: layerName(input, l),
    points: input.epochs.map((e) => [e.epoch + 1, pick(e)?.[l] ?? Number.NaN] as const),
  }));
}

function gradientChart(input: Pick<TuneReportInput, 'epochs' | 'layerNames'>): string {
  return lineChart({
    title: 'Gradient norm per layer',
    xTitle: 'epoch',
    yTitle: 'mean gradient norm',
    series: perLayerSeries(input, (e) => e.gradientNorms),
    log: true,
    integerX: true,
  });
}

/**
 * The curves alone as one SVG document: loss, accuracy (classifiers), gradient norm per layer.
 * @example writeFileSync('run.svg', tuneCurvesSvg({ title: 'tune iris', epochs, bestEpoch: 9 }))
 */
export function tuneCurvesSvg(input: Pick<TuneReportInput, 'title' | 'epochs' | 'layerNames' | 'notes'>): string {
  const acc = accuracyChart(input.epochs);
  return svgDocument(input.title, [lossChart(input.epochs), ...(acc ? [acc] : []), gradientChart(input)], undefined, input.notes);
}

export interface ClassScores {
  /** Right answers among rows predicted as the class; null when none were. */
  readonly precision: (number | null)[];
  /** Right answers among rows of the class; null when it has none. */
  readonly recall: (number | null)[];
  /** Rows of each true class. */
  readonly rows: number[];
}

/**
 * Per-class precision and recall from a confusion matrix (row = true class, column = predicted).
 * @example classScores([[8, 2], [1, 9]]) // precision [8/9, 9/11], recall [0.8, 0.9], rows [10, 10]
 */
export function classScores(confusion: readonly (readonly number[])[]): ClassScores {
  const n = confusion.length;
  const rows = confusion.map((r) => r.reduce((a, b) => a + b, 0));
  const predicted = Array.from({ length: n }, (_, c) => confusion.reduce((a, r) => a + (r[c] ?? 0), 0));
  return {
    precision: confusion.map((r, c) => (predicted[c] > 0 ? r[c] / predicted[c] : null)),
    recall: confusion.map((r, c) => (rows[c] > 0 ? r[c] / rows[c] : null)),
    rows,
  };
}

/** Plain-words titles of the training diagnostics, by code. */
const DIAGNOSTIC_TITLES: Record<string, string> = {
  vanishing_gradient: 'The first layers hardly learn (vanishing gradient)',
  dead_relu: 'Many ReLU units never switch on (dead units)',
  linear_stack: 'Two layers collapse into one (linear activation between dense layers)',
  raw_inputs: 'Inputs are not on a common scale',
  engine_fallback: 'Training ran on a slower engine than asked for',
};

/** A diagnostic of the run as a finding. */
export function diagnosticFinding(d: TuneDiagnosticView): Finding {
  const when = d.epoch !== undefined ? ` (first seen in epoch ${d.epoch + 1})` : '';
  return { title: DIAGNOSTIC_TITLES[d.code] ?? d.code.replace(/_/g, ' '), seen: `${d.message}${when}.`, todo: d.hint };
}

/** Hold-out loss this much above its best counts as rising. */
const RISE = 1.05;
/** Training accuracy this far above hold-out counts as a gap worth saying. */
const ACCURACY_GAP = 0.1;

/**
 * What the curves say, in plain words: overfitting (hold-out loss rising from its best while
 * training loss falls), a training loss that did not fall, an accuracy gap, no hold-out at all.
 * @example curveFindings(epochs, 9) // [{ title: 'The model began to memorise the training rows', ... }]
 */
export function curveFindings(epochs: readonly TuneEpochView[], bestEpoch: number): Finding[] {
  const out: Finding[] = [];
  if (epochs.length === 0) return out;
  const first = epochs[0];
  const last = epochs[epochs.length - 1];
  if (epochs.length >= 3 && !(last.trainLoss < first.trainLoss * 0.99)) {
    out.push({
      title: 'The training loss did not fall',
      seen: `Training loss went from ${valueText(first.trainLoss, false)} in epoch 1 to ${valueText(last.trainLoss, false)} in epoch ${last.epoch + 1}.`,
      todo: 'try a learning rate ten times smaller and ten times larger (--lr), check that --target names the right column, and look at the warnings below.',
    });
  }
  if (!hasHoldout(epochs)) {
    out.push({
      title: 'No hold-out rows: overfitting cannot be seen',
      seen: 'Every row was used for training, so these curves show how well the model fits rows it has seen, not new ones.',
      todo: 'keep some rows apart with --holdout 0.2 (or --holdout-file FILE) and add --stop-after 5 to keep the best weights.',
    });
    return out;
  }
  const held = epochs.filter((e) => e.holdoutLoss !== null && Number.isFinite(e.holdoutLoss));
  if (held.length === 0) return out;
  const best = held.reduce((a, b) => (b.holdoutLoss! < a.holdoutLoss! ? b : a));
  const lastHeld = held[held.length - 1];
  if (lastHeld.epoch >= best.epoch + 2 && lastHeld.holdoutLoss! > best.holdoutLoss! * RISE && lastHeld.trainLoss < best.trainLoss) {
    out.push({
      title: 'The model began to memorise the training rows (overfitting)',
      seen: `Hold-out loss was lowest in epoch ${best.epoch + 1} (${valueText(best.holdoutLoss!, false)}) and rose to ${valueText(lastHeld.holdoutLoss!, false)} by epoch ${lastHeld.epoch + 1}, while training loss kept falling.`,
      todo:
        bestEpoch === best.epoch
          ? `the saved weights are those of epoch ${best.epoch + 1}; to save time next run, fewer epochs are enough.`
          : `add --stop-after 5 to keep the weights of the best epoch, or use fewer epochs, dropout or --weight-decay.`,
    });
  } else {
    out.push({
      title: 'Hold-out loss kept up with training',
      seen: `Hold-out loss was lowest in epoch ${best.epoch + 1} (${valueText(best.holdoutLoss!, false)}); it did not rise more than ${Math.round((RISE - 1) * 100)}% after.`,
      todo: '',
      fine: true,
    });
  }
  const at = epochs.find((e) => e.epoch === bestEpoch) ?? last;
  if (at.trainAccuracy !== null && at.holdoutAccuracy !== null && at.trainAccuracy - at.holdoutAccuracy > ACCURACY_GAP) {
    out.push({
      title: 'Hold-out accuracy trails training accuracy',
      seen: `In epoch ${at.epoch + 1}: ${valueText(at.trainAccuracy, true)} on training rows, ${valueText(at.holdoutAccuracy, true)} on hold-out rows.`,
      todo: 'more rows, a smaller model, dropout or --weight-decay narrow the gap; so does checking that both splits come from the same source.',
    });
  }
  return out;
}

function classSections(input: TuneReportInput): PageSection[] {
  const at = input.epochs.find((e) => e.epoch === input.bestEpoch) ?? input.epochs[input.epochs.length - 1];
  const confusion = at?.confusion;
  if (!confusion || confusion.length === 0) return [];
  const which = hasHoldout(input.epochs) ? 'hold-out' : 'training';
  const labels = confusion.map((_, c) => input.classLabels?.[c] ?? `class ${c}`);
  const scores = classScores(confusion);
  const pct = (v: number | null) => (v === null ? '—' : valueText(v, true));
  return [
    {
      heading: 'Which classes get mixed up',
      intro: `The ${which} rows under the saved weights (epoch ${at.epoch + 1}): each row of the grid is a true class, each column the class the model chose.`,
      body: heatMap({ title: `Confusion matrix, ${which} rows`, labels, counts: confusion, rowTitle: 'true class', columnTitle: 'predicted class' }),
    },
    {
      heading: 'Precision and recall per class',
      intro: 'Precision: of the rows the model put in a class, the share that belong there. Recall: of the rows of a class, the share the model found.',
      body:
        barChart({
          title: `Precision and recall, ${which} rows`,
          valueTitle: 'share of rows',
          series: ['precision', 'recall'],
          groups: labels.map((l, c) => ({ label: l, values: [scores.precision[c], scores.recall[c]] })),
          percent: true,
          missing: 'no rows',
        }) +
        htmlTable(
          ['class', 'rows', 'precision', 'recall'],
          labels.map((l, c) => [l, String(scores.rows[c]), pct(scores.precision[c]), pct(scores.recall[c])]),
          [1, 2, 3],
        ),
    },
  ];
}

/**
 * The whole run as one HTML page.
 * @example writeFileSync('run.html', tunePage({ title: 'tune iris', epochs, bestEpoch: 9, diagnostics }))
 */
export function tunePage(input: TuneReportInput): string {
  const sections: PageSection[] = [];
  const findings = [...curveFindings(input.epochs, input.bestEpoch), ...(input.diagnostics ?? []).map(diagnosticFinding)];
  sections.push({
    heading: 'What the run says',
    intro: findings.some((f) => !f.fine) ? 'Read these first: each says what was seen and what to try.' : 'Nothing to act on.',
    body: findingsList(findings),
  });
  sections.push({
    heading: 'Loss',
    intro: hasHoldout(input.epochs) ? 'Lower is better. The hold-out curve is the honest one: those rows were never trained on.' : 'Lower is better.',
    body: lossChart(input.epochs),
  });
  const acc = accuracyChart(input.epochs);
  if (acc) sections.push({ heading: 'Accuracy', intro: 'Share of rows whose largest output is the right class.', body: acc });
  sections.push(...classSections(input));
  sections.push({
    heading: 'Gradient norm per layer',
    intro:
      'How strongly each layer was pushed per update, on a log scale. Lines far below the others (a factor of 1000 or more) mean those layers barely learn; lines that shoot up mean steps too large.',
    body: gradientChart(input),
  });
  const deadSeries = perLayerSeries(input, (e) => e.deadRelu);
  sections.push({
    heading: 'Dead ReLU units',
    intro:
      "Share of each hidden ReLU layer's units that never produced a positive output on the training rows in an epoch. Such units no longer learn; past 50% the run warns.",
    body: deadSeries.length
      ? lineChart({
          title: 'Dead ReLU share per layer',
          xTitle: 'epoch',
          yTitle: 'units that never fired',
          series: deadSeries,
          percent: true,
          include: [0, 1],
          integerX: true,
        })
      : para('The model has no hidden ReLU layers.', 'note'),
  });
  const last = input.epochs[input.epochs.length - 1];
  const lead = last
    ? `${input.epochs.length} epochs; weights saved from epoch ${input.bestEpoch + 1}${input.stoppedEarly ? ' (stopped early)' : ''}; final training loss ${valueText(last.trainLoss, false)}${last.holdoutLoss !== null ? `, hold-out loss ${valueText(last.holdoutLoss, false)}` : ''}.`
    : 'No epoch completed.';
  const facts = [...(input.facts ?? []), ...(input.notes ?? []).map((n) => ['note', n] as const)];
  return htmlPage({ title: input.title, lead, facts, sections });
}
