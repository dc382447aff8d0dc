/**
 * What `tendon tune` settles around the training run itself: the input files protected from
 * -o, feature names taken from the data file's header for a spec that names none, and tune
 * option errors worded with the flags the user typed.
 */
import { stat } from 'node:fs/promises';
import { TuneConfigError, UsageError } from '../errors.js';
import { openTable, resolveColumns, tableFormatOf } from '../io/index.js';

/** The same file on disk (device and inode), whatever path, link or hard link names it; false when either is missing. */
async function sameFile(a: string, b: string): Promise<boolean> {
  try {
    const [sa, sb] = await Promise.all([stat(a), stat(b)]);
    return sa.dev === sb.dev && sa.ino === sb.ino;
  } catch {
    return false;
  }
}

/**
 * Refuse an output path that is one of the run's inputs (the model or spec, the data files):
 * the input is never modified. Checked before any work.
 * @throws UsageError naming -o and the input it would overwrite.
 */
export async function refuseOverwritingInputs(out: string, inputs: readonly { path: string | undefined; what: string }[]): Promise<void> {
  for (const input of inputs) {
    if (input.path !== undefined && (await sameFile(out, input.path))) {
      throw new UsageError('-o', `${out} is the ${input.what} (${input.path}); tune never modifies its inputs: write the tuned model to another file`);
    }
  }
}

/**
 * The feature names a headed data file gives a model that has none: every named column except
 * the targets, in file order (the columns the training rows were read from). Null for files
 * without a header (NPY) or when the names cannot serve as feature names (wrong count, repeated).
 * @example await headerFeatureNames('iris.csv', ['species'], 4) // ['sepal_length', ...]
 */
export async function headerFeatureNames(file: string, targets: readonly string[], inputs: number): Promise<string[] | null> {
  if (tableFormatOf(file) === 'npy') return null;
  const probe = await openTable(file, { chunkRows: 1, textColumns: targets.filter((t) => !/^\d+$/.test(t)) });
  const columns = probe.columns;
  const width = probe.width;
  await probe.close();
  if (!columns) return null;
  const targetCols = resolveColumns(
    columns,
    width,
    targets.map((t) => (/^\d+$/.test(t) ? Number(t) : t)),
    file,
  );
  // Columns without a name (an index column, a trailing comma) are never read as features.
  const names = columns.filter((name, i) => name.trim() !== '' && !targetCols.includes(i));
  const usable = names.length === inputs && new Set(names).size === names.length;
  return usable ? names : null;
}

/** Tune options (the API's names) -> the flags of `tendon tune`. */
const FLAG_OF_OPTION: Readonly<Record<string, string>> = {
  epochs: '--epochs',
  batch: '--batch',
  lr: '--lr',
  optimizer: '--optimizer',
  weightDecay: '--weight-decay',
  schedule: '--schedule',
  warmup: '--warmup',
  clip: '--clip',
  seed: '--seed',
  holdout: '--holdout',
  holdoutData: '--holdout-file',
  stopAfter: '--stop-after',
  freeze: '--freeze',
  anchor: '--anchor',
  replay: '--replay',
  replayPerBatch: '--replay-share',
  normalisation: '--normalisation',
  loss: '--loss',
  path: '--engine',
  data: '--data',
  scaleTargets: '--raw-targets',
};

/**
 * A TuneConfigError raised under the command line, reworded with flags: "--stop-after: early
 * stopping needs hold-out rows (--holdout or --holdout-file)". Other errors pass unchanged.
 */
export function inFlagTerms(error: unknown): unknown {
  if (!(error instanceof TuneConfigError)) return error;
  const option = error.option.split('.')[0];
  const flagName = FLAG_OF_OPTION[option];
  if (!flagName) return error;
  const detail = error.detail.replace(/(?<![-\w.[])([a-z][A-Za-z]*)(?![-\w(])/g, (word: string) =>
    word !== word.toLowerCase() || word === 'holdout' ? (FLAG_OF_OPTION[word] ?? word) : word,
  );
  return new UsageError(flagName, detail);
}
