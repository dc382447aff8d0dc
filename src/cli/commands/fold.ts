import { readModelFile, writeModelFile } from '../../format/index.js';
import { foldModel } from '../../transform/index.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { bytesText } from '../format.js';

const flags = {
  out: { kind: 'string', short: 'o', help: 'where to write the folded model' },
} as const;

export const fold: Command = {
  name: 'fold',
  usage: 'tendon fold MODEL -o OUT',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const out = requireFlag(f.out, 'out');
    const read = await readModelFile(path);
    const { doc, steps } = foldModel(read.doc, { parent: { checksum: read.checksum, source: path } });
    const written = await writeModelFile(out, doc);
    const lines = steps.map((s) => {
      const where = s.layers.length > 0 ? ` layers ${s.layers.join(', ')}` : '';
      return `  ${s.folded ? 'folded' : 'kept  '}  ${s.step}${where}${s.reason ? `: ${s.reason}` : ''}`;
    });
    io.out(
      `folded ${path} (${read.doc.layers.length} layers) into ${out} (${doc.layers.length} layers, ${bytesText(written.bytes)}), checksum ${written.checksum}\n` +
        `${lines.join('\n')}\n` +
        `judge it: tendon check ${out} --against ${path}\n`,
    );
    return 0;
  },
};
