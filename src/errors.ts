/**
 * Errors a user can cause. Each carries fields, not just text, and an exit code for the CLI:
 * 2 = bad input or usage, 1 = a failure while working. The CLI prints `message` as one line.
 */

export type ExitCode = 1 | 2;

export abstract class TendonError extends Error {
  abstract readonly exitCode: ExitCode;
  /** What the user can do about it, in a few words; the CLI prints it after the message. Empty when the message says it all. */
  hint = '';
  override get name(): string {
    return this.constructor.name;
  }
  /** The same error with a hint that fits where it was thrown. */
  withHint(hint: string): this {
    this.hint = hint;
    return this;
  }
}

/** One problem found in a model file or a model spec; `where` names the layer, tensor or field. */
export interface Problem {
  readonly where: string;
  readonly message: string;
}

/** A model file (or spec) that cannot be used. Every problem found is listed, so a user fixes all in one pass. */
export class ModelFileError extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly path: string,
    readonly problems: readonly Problem[],
  ) {
    super(`${path}: ` + problems.map((p) => (p.where ? `${p.where}: ${p.message}` : p.message)).join('; '));
  }
}

/** A tensor whose shape does not fit where it is used. */
export class ShapeError extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly tensor: string,
    readonly expected: readonly (number | string)[],
    readonly actual: readonly number[],
    context = '',
  ) {
    super(`${context ? context + ': ' : ''}${tensor} has shape [${actual.join(', ')}], expected [${expected.join(', ')}]`);
  }
  override hint = 'tendon about MODEL shows the features the model takes and the values it gives';
}

/** A bad row, cell or header in a data file. line and column are 1-based; 0 means "not known". */
export class DataError extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly file: string,
    readonly line: number,
    readonly column: number,
    readonly detail: string,
  ) {
    super(`${file}${line ? `:${line}` : ''}${column ? `:${column}` : ''}: ${detail}`);
  }
}

/** A bad command-line flag, argument or option value. */
export class UsageError extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly flag: string,
    readonly detail: string,
  ) {
    super(flag ? `${flag}: ${detail}` : detail);
  }
}

/** Bad training configuration, refused before any epoch runs. */
export class TuneConfigError extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly option: string,
    readonly detail: string,
  ) {
    super(`tune option ${option}: ${detail}`);
  }
  override hint = 'tendon tune --help lists each option with its default';
}

/** The engine and the float64 reference disagree beyond the stated tolerance. */
export class ParityError extends TendonError {
  readonly exitCode = 1;
  constructor(
    readonly where: string,
    readonly maxAbsError: number,
    readonly maxRelError: number,
    readonly tolerance: { abs: number; rel: number },
  ) {
    super(
      `parity broken at ${where}: max abs error ${maxAbsError.toExponential(3)}, max rel error ${maxRelError.toExponential(3)} (tolerance abs ${tolerance.abs}, rel ${tolerance.rel})`,
    );
  }
  override hint = 'compare with --engine js; if that engine holds, the one you chose computes wrongly here: report it with the model file';
}

/**
 * Training stopped because a loss or gradient became NaN or infinite. `outcome` says what
 * became of the weights (the API hands them back; the command line says nothing was saved).
 */
export class DivergenceError extends TendonError {
  readonly exitCode = 1;
  constructor(
    readonly epoch: number,
    readonly batch: number,
    readonly layer: string,
    readonly detail: string,
    readonly outcome: string,
  ) {
    super(`training diverged at epoch ${epoch}, batch ${batch}: ${detail} (first non-finite gradient in ${layer}); ${outcome}`);
  }
  override hint = 'lower the learning rate (--lr) or clip the gradient norm (--clip)';
}

/** A failure while working that the user did not cause directly (worker died twice, queue full...). */
export class RuntimeFailure extends TendonError {
  readonly exitCode = 1;
  constructor(message: string) {
    super(message);
  }
}

/** An engine that cannot run one of a model's layers; refused when the model is opened, never run as something else. */
export class EngineRefusal extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly engine: string,
    readonly layerIndex: number,
    readonly kind: string,
    readonly detail: string,
  ) {
    super(`the ${engine} engine cannot run layers[${layerIndex}] (${kind}): ${detail}`);
  }
  override hint = 'choose another engine with --engine (auto picks one that runs every layer)';
}

/** The engine asked for by name cannot run in this process (for 'auto' tendon falls back instead). */
export class EngineUnavailableError extends TendonError {
  readonly exitCode = 2;
  constructor(
    readonly engine: string,
    readonly reason: string,
  ) {
    super(`the ${engine} engine cannot run here: ${reason}`);
  }
  override hint = 'use --engine auto, which falls back to the next engine that runs, or name another (fast, wasm, js)';
}
