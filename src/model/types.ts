/**
 * The model document: what a model file holds, as plain data. Weights are float32 in memory
 * whatever their storage encoding on disk. A batch is rows x features; a dense layer computes
 * y = x·W + b with W stored row-major as [inputs, outputs].
 */

/** Every activation name, spelt once. */
export const ACTIVATIONS = ['linear', 'relu', 'leaky_relu', 'sigmoid', 'tanh', 'softplus', 'softmax'] as const;
export type ActivationName = (typeof ACTIVATIONS)[number];

/** Every layer kind, spelt once. */
export const LAYER_KINDS = ['dense', 'batchnorm', 'dropout'] as const;
export type LayerKindName = (typeof LAYER_KINDS)[number];

/** How a tensor is stored on disk. In memory it is always float32. */
export const STORAGE_CODECS = ['f32', 'f16', 'i8'] as const;
export type StorageCodec = (typeof STORAGE_CODECS)[number];

export interface DenseLayer {
  readonly kind: 'dense';
  /** Number of outputs. */
  size: number;
  activation: ActivationName;
  /** Slope for negative inputs; used by leaky_relu only. */
  alpha: number;
  /** [inputs, size], row-major. */
  weight: Float32Array;
  /** [size]. */
  bias: Float32Array;
}

export interface BatchNormLayer {
  readonly kind: 'batchnorm';
  gamma: Float32Array;
  beta: Float32Array;
  runningMean: Float32Array;
  runningVariance: Float32Array;
  epsilon: number;
  /** Weight of the old running statistic when a training batch updates it (0.9 keeps 90%). */
  momentum: number;
}

export interface DropoutLayer {
  readonly kind: 'dropout';
  /** Probability that a unit is zeroed while training. Identity at inference. */
  rate: number;
}

export type Layer = DenseLayer | BatchNormLayer | DropoutLayer;

/**
 * Input normalisation kept inside the model, so callers pass raw features.
 * Statistics are float64; `count` rows have been seen. A block whose values are null is
 * waiting to be fitted from data on the first tune.
 */
export type Normalisation =
  | {
      method: 'zscore';
      /** Running mean per feature. */
      mean: Float64Array | null;
      /** Standard deviation per feature (population). */
      std: Float64Array | null;
      /** Sum of squared deviations per feature (Welford's M2), so updates can continue. */
      m2: Float64Array | null;
      count: number;
    }
  | {
      method: 'minmax';
      min: Float64Array | null;
      max: Float64Array | null;
      count: number;
    };

/**
 * Regression targets as the model learnt them: training saw (y - mean) / std per output, so
 * the answer is y = z·std + mean, z being the last dense layer's linear output. Runners fold
 * it into that layer (model/target-scaling.ts); training works on z.
 */
export interface TargetScaling {
  readonly mean: Float64Array;
  /** Each finite and > 0. */
  readonly std: Float64Array;
}

/**
 * The input range of each dense layer, in order, recorded by running the float model on real
 * rows (`shrink --calibrate`). The int8 engine quantises a dense layer's input onto its stored
 * range, clamping values outside it, instead of each row's own range (activation-ranges.ts).
 */
export interface ActivationRanges {
  /** One per dense layer: the smallest value seen at its input. */
  readonly min: Float64Array;
  /** One per dense layer, >= min. */
  readonly max: Float64Array;
  /** Rows the ranges were recorded on. */
  readonly rows: number;
}

export interface Provenance {
  /** CRC-32 of the parent file's payload, as 8 lowercase hex digits. */
  checksum: string;
  /** Where the parent came from, in words: its path as given, "spec PATH", "a model held in memory". */
  source: string;
  /** What was done to it, worded to read "ACTION from SOURCE": "trained", "fine-tuned", "shrunk to f16", "folded". */
  action: string;
  /** ISO 8601 time. */
  at: string;
}

export interface ModelMeta {
  name: string;
  description: string;
  /** ISO 8601 time. */
  created: string;
  /** Free-form string pairs. */
  extra: Record<string, string>;
}

export interface ModelDoc {
  inputs: number;
  /** Optional feature names, one per input. */
  features: string[] | null;
  /** Optional output labels, one per output. */
  labels: string[] | null;
  normalise: Normalisation | null;
  /** Absent or null: the last layer's outputs are the answers. */
  targetScaling?: TargetScaling | null;
  layers: Layer[];
  meta: ModelMeta;
  provenance: Provenance[];
  /** How tensors are stored when this document is written. */
  storage: StorageCodec;
  /**
   * Calibration temperature T > 0 fitted by `tune --calibrate`: the output layer's logits are
   * divided by T before its softmax or sigmoid. Absent (or 1) means none; see temperature.ts.
   */
  temperature?: number;
  /** Absent or null: the int8 engine takes each row's own range (activation-ranges.ts). */
  activationRanges?: ActivationRanges | null;
}

/** A named float32 tensor of a layer, e.g. layers[0].weight [4, 16]. */
export interface ParamRef {
  readonly name: string;
  readonly shape: readonly number[];
  readonly data: Float32Array;
}
