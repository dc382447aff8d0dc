import { runDemo } from '../../demo/story.js';
import { noExtraPositionals, parseArgs } from '../args.js';
import type { Command } from '../command.js';
import { ENGINE_FLAG, parseEngine } from './engine-flag.js';

const flags = {
  dir: { kind: 'string', help: "folder for the demo's model files (default: a new temporary folder)" },
  seed: { kind: 'integer', help: 'seed of the invented data and the initial weights', default: 7 },
  engine: ENGINE_FLAG,
} as const;

export const demo: Command = {
  name: 'demo',
  usage: 'tendon demo [--dir DIR] [--seed N] [--engine js|wasm|fast|int8|auto]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    noExtraPositionals(positionals, 0);
    const outcome = await runDemo({
      dir: f.dir,
      seed: f.seed ?? 7,
      engine: parseEngine(f.engine),
      say: (line) => io.out(line + '\n'),
      signal: io.signal,
    });
    return outcome.parityPass ? 0 : 1;
  },
};
