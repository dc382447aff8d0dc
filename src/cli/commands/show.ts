import { readModelFile } from '../../format/index.js';
import { layerKind, modelWidths, type ModelDoc } from '../../model/index.js';
import { noExtraPositionals, parseArgs, requirePositional } from '../args.js';
import { describeStorageCosts, storageCost } from '../../transform/index.js';
import type { Command } from '../command.js';
import { bytesText, grouped, textTable } from '../format.js';

const flags = {
  json: { kind: 'boolean', help: 'print the facts as one JSON object' },
  costs: { kind: 'boolean', help: 'also measure the size and parity cost of each storage choice (f32, f16, i8)' },
} as const;

export const show: Command = {
  name: 'show',
  summary: 'describe a model file: layers, shapes, parameters, normalisation, metadata, checksum, provenance',
  usage: 'tendon show MODEL [--json] [--costs]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const read = await readModelFile(path);
    const facts = modelFacts(read.doc, { path, checksum: read.checksum, bytes: read.bytes, version: `${read.version.major}.${read.version.minor}` });
    const costs = f.costs ? storageCost(read.doc) : null;
    io.out(f.json ? JSON.stringify(costs ? { ...facts, storageCosts: costs } : facts, null, 2) + '\n' : describe(facts) + (costs ? '\n' + describeStorageCosts(costs) : ''));
    return 0;
  },
};

export interface ModelFacts {
  file: { path: string; bytes: number; checksum: string; formatVersion: string } | null;
  name: string;
  description: string;
  created: string;
  inputs: number;
  outputs: number;
  features: string[] | null;
  labels: string[] | null;
  normalise: { method: string; fitted: boolean; rowsSeen: number } | null;
  storage: string;
  parameters: number;
  layers: { index: number; kind: string; activation?: string; inputs: number; outputs: number; tensors: { name: string; shape: number[] }[]; parameters: number; detail: string }[];
  provenance: ModelDoc['provenance'];
  extra: Record<string, string>;
}

/** The facts `show` prints; also served by the HTTP endpoint's description route. */
export function modelFacts(doc: ModelDoc, file: { path: string; checksum: string; bytes: number; version: string } | null): ModelFacts {
  const widths = modelWidths(doc);
  const layers = doc.layers.map((layer, i) => {
    const kind = layerKind(layer.kind);
    const tensors = kind.tensors(layer, widths[i], i).map((t) => ({ name: t.name, shape: [...t.shape] }));
    const trainable = kind.trainable(layer, widths[i], i).reduce((n, t) => n + t.data.length, 0);
    const detail =
      layer.kind === 'dense'
        ? layer.activation === 'leaky_relu'
          ? `leaky_relu (alpha ${layer.alpha})`
          : layer.activation
        : layer.kind === 'batchnorm'
          ? `epsilon ${layer.epsilon}, momentum ${layer.momentum}`
          : `rate ${layer.rate}`;
    return {
      index: i,
      kind: layer.kind,
      ...(layer.kind === 'dense' ? { activation: layer.activation } : {}),
      inputs: widths[i],
      outputs: widths[i + 1],
      tensors,
      parameters: trainable,
      detail,
    };
  });
  const norm = doc.normalise;
  return {
    file: file ? { path: file.path, bytes: file.bytes, checksum: file.checksum, formatVersion: file.version } : null,
    name: doc.meta.name,
    description: doc.meta.description,
    created: doc.meta.created,
    inputs: doc.inputs,
    outputs: widths[widths.length - 1],
    features: doc.features,
    labels: doc.labels,
    normalise: norm
      ? { method: norm.method, fitted: norm.method === 'zscore' ? norm.mean !== null : norm.min !== null, rowsSeen: norm.count }
      : null,
    storage: doc.storage,
    parameters: layers.reduce((n, l) => n + l.parameters, 0),
    layers,
    provenance: doc.provenance,
    extra: doc.meta.extra,
  };
}

function describe(f: ModelFacts): string {
  const lines: string[] = [];
  if (f.file) lines.push(`${f.file.path}  ${bytesText(f.file.bytes)}  format ${f.file.formatVersion}  checksum ${f.file.checksum}`);
  if (f.name || f.description) lines.push(`${f.name}${f.description ? ` — ${f.description}` : ''}`);
  lines.push(`created ${f.created || '(unknown)'}; weights stored as ${f.storage}`);
  lines.push(`inputs ${f.inputs}${f.features ? `: ${f.features.join(', ')}` : ''}`);
  lines.push(`outputs ${f.outputs}${f.labels ? `: ${f.labels.join(', ')}` : ''}`);
  lines.push(
    f.normalise
      ? `normalisation ${f.normalise.method}, ${f.normalise.fitted ? `fitted over ${grouped(f.normalise.rowsSeen)} rows` : 'not fitted yet (fitted from data on the first tune)'}`
      : 'normalisation none (callers must pass features on a sensible scale)',
  );
  lines.push('');
  lines.push(
    textTable(
      ['#', 'layer', 'in', 'out', 'parameters', 'tensors'],
      f.layers.map((l) => [
        String(l.index),
        `${l.kind} ${l.detail}`,
        String(l.inputs),
        String(l.outputs),
        grouped(l.parameters),
        l.tensors.map((t) => `${t.name.split('.').pop()} [${t.shape.join('x')}]`).join(' ') || '—',
      ]),
    ).trimEnd(),
  );
  lines.push(`trainable parameters ${grouped(f.parameters)}`);
  if (f.provenance.length > 0) {
    lines.push('', 'provenance:');
    for (const p of f.provenance) lines.push(`  ${p.at}  ${p.action}  from ${p.source} (checksum ${p.checksum})`);
  }
  const extra = Object.entries(f.extra);
  if (extra.length > 0) lines.push('', ...extra.map(([k, v]) => `${k}: ${v}`));
  return lines.join('\n') + '\n';
}
