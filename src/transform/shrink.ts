/**
 * Compact storage: a model whose dense weights are stored as float16 or int8, and what that
 * costs in size and in numbers against the float32 original.
 */
import { randomInputs } from '../check/index.js';
import { checksumOf, decodeModel, encodeModel } from '../format/index.js';
import { STORAGE_CODECS, type ModelDoc, type StorageCodec } from '../model/index.js';
import { compareOutputs, type OutputComparison } from './compare.js';
import { SHRINK_TOLERANCE } from './tolerance.js';

export interface ShrinkOptions {
  /** The parent file, for provenance; computed from the document when not given. */
  readonly parent?: { checksum: string; source: string };
  /** ISO 8601 time for the provenance record; default now. */
  readonly at?: string;
}

/**
 * A copy of `doc` stored with `codec`. The weights are encoded and decoded once, so the
 * returned document holds exactly the (rounded or quantised) values a reader of its file gets.
 * @example
 * const small = shrinkModel(doc, 'i8');
 * await writeModelFile('bakery-i8.tendon', small);
 * @throws ModelFileError when a weight cannot be stored with the codec (beyond the float16 range).
 */
export function shrinkModel(doc: ModelDoc, codec: StorageCodec, options: ShrinkOptions = {}): ModelDoc {
  const parent = options.parent ?? {
    checksum: checksumOf(encodeModel(doc)),
    source: doc.meta.name ? `${doc.meta.name}, held in memory` : 'a model held in memory',
  };
  const marked: ModelDoc = {
    ...doc,
    storage: codec,
    provenance: [
      ...doc.provenance,
      { checksum: parent.checksum, source: parent.source, action: `shrunk to ${codec}`, at: options.at ?? new Date().toISOString() },
    ],
  };
  return decodeModel(encodeModel(marked, `(model shrunk to ${codec})`), `(model shrunk to ${codec})`).doc;
}

export interface StorageChoice {
  readonly codec: StorageCodec;
  /** Size of the whole file with this codec. */
  readonly fileBytes: number;
  /** Bytes of the dense weight tensors' values (and int8 scales) in the file. */
  readonly weightBytes: number;
  /** Output of this choice against the float32 original, both on the float64 reference path. */
  readonly cost: OutputComparison;
  /** The tolerance `check --against` holds this codec to. */
  readonly tolerance: { abs: number; rel: number };
}

/**
 * Size on disk and parity cost of each storage codec, measured on `rows` seeded inputs drawn
 * around the model's normalisation statistics.
 * @example storageCost(doc).map((c) => `${c.codec}: ${c.fileBytes} B, max rel ${c.cost.maxRel}`)
 */
export function storageCost(doc: ModelDoc, options: { rows?: number; seed?: number } = {}): StorageChoice[] {
  const rows = options.rows ?? 256;
  const x = randomInputs(doc, rows, options.seed ?? 1);
  // The f32 document as its file would hold it: the baseline every codec is compared with.
  const original: ModelDoc = { ...doc, storage: 'f32' };
  return STORAGE_CODECS.map((codec) => {
    const stored: ModelDoc = { ...doc, storage: codec };
    const bytes = encodeModel(stored);
    const again = decodeModel(bytes, `(model stored as ${codec})`).doc;
    return {
      codec,
      fileBytes: bytes.length,
      weightBytes: denseWeightBytes(doc, codec),
      cost: compareOutputs(original, again, x, rows, SHRINK_TOLERANCE[codec]),
      tolerance: SHRINK_TOLERANCE[codec],
    };
  });
}

/** Bytes the dense weights take with a codec: 4, 2 or 1 per value, plus one float32 scale per column for int8. */
export function denseWeightBytes(doc: ModelDoc, codec: StorageCodec): number {
  let total = 0;
  for (const layer of doc.layers) {
    if (layer.kind !== 'dense') continue;
    const values = layer.weight.length;
    total += codec === 'f32' ? 4 * values : codec === 'f16' ? 2 * values : values + 4 * layer.size;
  }
  return total;
}

/**
 * The verdict for one choice, from the same per-value rule the check applies: a value passes
 * when its abs error <= abs OR its rel error <= rel, so the largest rel error (often on an output
 * near 0, judged by abs) may exceed rel while every value is within. The worst value's share of
 * its bound says how close the choice came.
 * @example costVerdict(choice.cost) // "within (worst value at 16% of its bound)"
 */
export function costVerdict(cost: OutputComparison): string {
  return cost.pass
    ? `within (worst value at ${Math.round(cost.worstRatio * 100)}% of its bound)`
    : `BROKEN (worst value ${cost.worstRatio.toPrecision(3)}x its bound)`;
}

/**
 * The storage choices as lines of text for `about --costs`; the top-class column only for
 * models whose answers are classes.
 * @example describeStorageCosts(storageCost(doc)) // "storage  file  dense weights  max abs err ..."
 */
export function describeStorageCosts(choices: readonly StorageChoice[]): string {
  const classes = choices.some((c) => c.cost.topClassAgreement !== null);
  const header = ['store', 'file bytes', 'weight bytes', 'max abs err', 'max rel err', ...(classes ? ['top class agrees'] : []), 'tolerance', 'verdict'];
  const rows = choices.map((c) => [
    c.codec,
    String(c.fileBytes),
    String(c.weightBytes),
    short(c.cost.maxAbs),
    short(c.cost.maxRel),
    ...(classes ? [c.cost.topClassAgreement === null ? '-' : `${(c.cost.topClassAgreement * 100).toFixed(1)}%`] : []),
    `abs ${c.tolerance.abs} or rel ${c.tolerance.rel}`,
    costVerdict(c.cost),
  ]);
  const widths = header.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i].length)));
  const line = (cells: string[]) =>
    cells
      .map((cell, i) => (i === 0 || i >= cells.length - 2 ? cell.padEnd(widths[i]) : cell.padStart(widths[i])))
      .join('  ')
      .trimEnd();
  const rowsSeen = choices[0]?.cost.rows ?? 0;
  return (
    [
      `storage choices (outputs against float32 on ${rowsSeen} seeded rows, float64 reference path):`,
      line(header),
      ...rows.map(line),
      'a value is within when its abs error <= abs or its rel error <= rel (rel errors of outputs near 0 are judged by abs)',
    ].join('\n') + '\n'
  );
}

function short(v: number): string {
  return v === 0 ? '0' : v.toExponential(2);
}
