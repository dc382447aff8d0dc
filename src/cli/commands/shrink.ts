import { readModelFile, writeModelFile } from '../../format/index.js';
import { costVerdict, shrinkModel, storageCost } from '../../transform/index.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { bytesText, sci } from '../format.js';
import { parseStore } from './pack.js';

const flags = {
  store: { kind: 'string', help: 'storage for the dense weights: f16 or i8 (or f32 to expand back)' },
  out: { kind: 'string', short: 'o', help: 'where to write the shrunken model' },
} as const;

export const shrink: Command = {
  name: 'shrink',
  usage: 'tendon shrink MODEL --store f16|i8 -o OUT',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const codec = parseStore(requireFlag(f.store, 'store'));
    const out = requireFlag(f.out, 'out');
    const read = await readModelFile(path);
    const small = shrinkModel(read.doc, codec, { parent: { checksum: read.checksum, source: path } });
    const cost = storageCost(read.doc).find((c) => c.codec === codec)!;
    const written = await writeModelFile(out, small);
    io.out(
      `shrank ${path} (${bytesText(read.bytes)}, ${read.doc.storage}) to ${out} (${bytesText(written.bytes)}, ${codec}), checksum ${written.checksum}\n` +
        `outputs against float32 on ${cost.cost.rows} seeded rows: max abs err ${sci(cost.cost.maxAbs)}, max rel err ${sci(cost.cost.maxRel)}` +
        `${cost.cost.topClassAgreement === null ? '' : `, top class agrees on ${(cost.cost.topClassAgreement * 100).toFixed(1)}%`}; ` +
        `${costVerdict(cost.cost)}; bound per value: abs ${cost.tolerance.abs} or rel ${cost.tolerance.rel}\n` +
        `judge it on your own rows: tendon check ${out} --against ${path} --input ROWS\n`,
    );
    return 0;
  },
};
