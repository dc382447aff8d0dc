import { readFile } from 'node:fs/promises';
import { DataError, UsageError } from '../../errors.js';
import { writeModelFile } from '../../format/index.js';
import { readNpy } from '../../io/index.js';
import { STORAGE_CODECS, type StorageCodec } from '../../model/index.js';
import { buildFromSpec } from '../../spec/spec.js';
import { parseJsonText } from '../../io/json-text.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { bytesText } from '../format.js';

const flags = {
  out: { kind: 'string', short: 'o', help: 'where to write the model file' },
  seed: { kind: 'integer', help: 'seed for weights the spec leaves out', default: 1 },
  store: { kind: 'string', help: `how weights are stored: ${STORAGE_CODECS.join(', ')} (default: the spec's "store", else f32)` },
} as const;

export const pack: Command = {
  name: 'pack',
  usage: 'tendon pack SPEC.json -o MODEL [--seed N] [--store f32|f16|i8]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const specPath = requirePositional(positionals, 0, 'the spec file (tendon pack SPEC.json -o MODEL)');
    noExtraPositionals(positionals, 1);
    const out = requireFlag(f.out, 'out');
    const store = f.store === undefined ? undefined : parseStore(f.store);
    const doc = await buildModelFromSpecFile(specPath, { seed: f.seed, store });
    const written = await writeModelFile(out, doc);
    io.out(
      `packed ${out}: ${doc.layers.length} layers, ${doc.inputs} inputs, stored ${doc.storage}, ${bytesText(written.bytes)}, checksum ${written.checksum}\n`,
    );
    return 0;
  },
};

export function parseStore(value: string): StorageCodec {
  if (!(STORAGE_CODECS as readonly string[]).includes(value)) {
    throw new UsageError('--store', `must be one of ${STORAGE_CODECS.join(', ')}, got "${value}"`);
  }
  return value as StorageCodec;
}

/** Read a spec file (JSON) and build the model document it describes. */
export async function buildModelFromSpecFile(specPath: string, opts: { seed?: number; store?: StorageCodec }) {
  let text: string;
  try {
    text = await readFile(specPath, 'utf8');
  } catch (error) {
    const code = (error as NodeJS.ErrnoException).code;
    throw new DataError(specPath, 0, 0, code === 'ENOENT' ? 'no such file' : `cannot read the spec (${code ?? String(error)})`);
  }
  const spec = parseJsonText(text, specPath);
  return buildFromSpec(spec, specPath, {
    seed: opts.seed,
    store: opts.store,
    loadTensorFile: async (path) => {
      const npy = await readNpy(path);
      return { shape: npy.shape, data: npy.data };
    },
  });
}
