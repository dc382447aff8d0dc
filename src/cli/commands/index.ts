/**
 * Every command, in the order `tendon help` lists them: its name and one-line summary here, the
 * rest in its own file, imported only when the command runs (or its --help is asked for), so
 * `tendon help` and each command load only what they need.
 */
import type { Command } from '../command.js';

export interface CommandEntry {
  readonly name: string;
  readonly summary: string;
  load(): Promise<Command>;
}

export const commands: readonly CommandEntry[] = [
  {
    name: 'demo',
    summary: 'the whole job on an invented, seeded bakery: pack, train, score, prove parity, fine-tune for a second site',
    load: async () => (await import('./demo.js')).demo,
  },
  {
    name: 'pack',
    summary: 'build a model file from a JSON layer spec (weights inline, from .npy files, or seeded)',
    load: async () => (await import('./pack.js')).pack,
  },
  {
    name: 'about',
    summary: 'describe a model file: layers, shapes, parameters, normalisation, metadata, checksum, provenance',
    load: async () => (await import('./about.js')).about,
  },
  { name: 'score', summary: 'score a data file with a model, streaming, one output row per input row', load: async () => (await import('./score.js')).score },
  {
    name: 'check',
    summary: 'prove the engine against the float64 reference, per layer and at the output (exit 1 if a tolerance breaks)',
    load: async () => (await import('./check.js')).check,
  },
  {
    name: 'explain',
    summary: "per-feature attributions of each row's answer (integrated gradients on the float64 reference path)",
    load: async () => (await import('./explain.js')).explain,
  },
  {
    name: 'tune',
    summary: 'train or fine-tune a model (a model file, or a JSON spec) on local data with mini-batch gradient descent',
    load: async () => (await import('./tune.js')).tune,
  },
  {
    name: 'bench',
    summary: "measure a model's throughput and latency on this machine: rows/s, GFLOP/s, p50/p99, memory, tensors",
    load: async () => (await import('./bench.js')).bench,
  },
  {
    name: 'shrink',
    summary: "store a model's dense weights as float16 or int8 (per-column scale); prints the size and how far it moved from the parent",
    load: async () => (await import('./shrink.js')).shrink,
  },
  {
    name: 'fold',
    summary: 'fold normalisation, batch normalisation, dropout and linear layer pairs into fewer dense layers (same answers)',
    load: async () => (await import('./fold.js')).fold,
  },
  {
    name: 'serve',
    summary: 'serve a model over HTTP on loopback: score, about, alive, ready and counters routes; hot swap on file change or SIGHUP',
    load: async () => (await import('./serve.js')).serve,
  },
];
