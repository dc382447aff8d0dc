// What the load scripts (soak.mjs, wire.mjs) share: where things are, positive-number options,
// a hard deadline, seeded rows, and starting a server process that prints its URL.
import { spawn } from 'node:child_process';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { SeededRng } from '../dist/index.js';

export const HERE = dirname(fileURLToPath(import.meta.url));
export const ROOT = join(HERE, '..');
export const CLI = join(ROOT, 'dist', 'cli.js');
export const RESULTS = join(HERE, 'RESULTS.md');

/** `--name N` from the command line (a positive number), else `fallback`; anything else ends the process (exit 2), naming `tool`. */
export function option(tool, name, fallback) {
  const i = process.argv.indexOf(`--${name}`);
  if (i < 0) return fallback;
  const value = Number(process.argv[i + 1]);
  if (!(value > 0)) {
    console.error(`${tool}: --${name} needs a positive number`);
    process.exit(2);
  }
  return value;
}

/** End the process (exit 1) after `ms` whatever happens; does not keep it alive. */
export function hardDeadline(tool, ms) {
  const timer = setTimeout(() => {
    console.error(`${tool}: hard deadline passed; stopping`);
    process.exit(1);
  }, ms);
  timer.unref();
}

/** Seeded uniform numbers in [0, 1) (tendon's own generator), so every run sends the same rows. */
export function seeded(seed) {
  const rng = new SeededRng(seed);
  return () => rng.next();
}

/** A node process running `args`; `url` resolves to the first match of `pattern`'s group 1 on its stdout, and rejects (with its stderr) if it exits first. */
export function startChild(args, pattern) {
  const child = spawn(process.execPath, args, { stdio: ['ignore', 'pipe', 'pipe'] });
  let log = '';
  child.stderr.on('data', (d) => (log += d));
  const url = new Promise((resolve, reject) => {
    let out = '';
    child.stdout.on('data', (d) => {
      out += d;
      const m = pattern.exec(out);
      if (m) resolve(m[1]);
    });
    child.once('exit', (code) => reject(new Error(`${args[1] ?? args[0]} exited ${code}: ${log.trim()}`)));
  });
  return { child, url };
}

/**
 * An NPY float32 [rows, columns] request body (NEP 1, format 1.0, data on a 64-byte boundary),
 * written here rather than by the library so the load generators stay independent of the reader
 * they load.
 */
export function npyBody(values, rows, columns) {
  const dict = `{'descr': '<f4', 'fortran_order': False, 'shape': (${rows}, ${columns}), }`;
  const total = Math.ceil((10 + dict.length + 1) / 64) * 64;
  const head = Buffer.alloc(total, 0x20);
  Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]).copy(head);
  head.writeUInt16LE(total - 10, 8);
  head.write(dict, 10, 'latin1');
  head[total - 1] = 0x0a;
  return Buffer.concat([head, Buffer.from(values.buffer, values.byteOffset, values.byteLength)]);
}
