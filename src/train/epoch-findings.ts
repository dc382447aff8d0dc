/**
 * What an epoch reports beyond its metrics: each layer's mean gradient norm, the share of dead
 * ReLU units, and the diagnostics they raise, with a run-level list that keeps each diagnostic
 * the first time it appears.
 */
import type { ModelDoc } from '../model/index.js';
import { vanishingGradient, type Diagnostic, type LayerNorm, type ReluActivity } from './diagnostics.js';

export interface EpochFindings {
  readonly gradientNorms: Record<number, number>;
  readonly deadRelu: Record<number, number>;
  readonly diagnostics: Diagnostic[];
}

/**
 * Findings of one epoch from the per-layer sums of batch gradient norms and the ReLU activity
 * seen when evaluating the training rows.
 *
 * @example const { gradientNorms } = epochFindings(work, normSums, batches.length, trainEval.relu, epoch);
 */
export function epochFindings(doc: ModelDoc, normSums: ReadonlyMap<number, number>, batches: number, relu: ReluActivity, epoch: number): EpochFindings {
  const gradientNorms: Record<number, number> = {};
  const norms: LayerNorm[] = [];
  for (const [l, sum] of [...normSums].sort((a, b) => a[0] - b[0])) {
    gradientNorms[l] = sum / batches;
    norms.push({ layer: l, kind: doc.layers[l].kind, norm: gradientNorms[l] });
  }
  const deadRelu: Record<number, number> = {};
  for (const s of relu.deadShares()) deadRelu[s.layer] = s.dead / s.units;
  const diagnostics = [...relu.warnings(epoch)];
  const vanishing = vanishingGradient(norms, epoch);
  if (vanishing) diagnostics.unshift(vanishing);
  return { gradientNorms, deadRelu, diagnostics };
}

/** A run's diagnostics: each code (per layer) kept the first time it appears. */
export class DiagnosticLog {
  readonly list: Diagnostic[];
  private readonly seen = new Set<string>();

  /** `first`: the run-level diagnostics (nulls skipped), listed whether or not they repeat. */
  constructor(first: readonly (Diagnostic | null)[]) {
    this.list = first.filter((d): d is Diagnostic => d !== null);
  }

  /** Append each of `found` whose code and layer have not been added before. */

  addNew(found: readonly Diagnostic[]): void {
    for (const d of found) {
      const key = `${d.code}:${d.layer ?? ''}`;
      if (!this.seen.has(key)) {
        this.seen.add(key);
        this.list.push(d);
      }
    }
  }
}
