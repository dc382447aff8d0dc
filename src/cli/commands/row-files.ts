/**
 * What the commands that read rows from a file and write one row per input row share (score,
 * explain): `MODEL --input ROWS --output OUT`, both files required.
 */
import { noExtraPositionals, parseArgs, requireFlag, requirePositional, type FlagSpecs, type FlagValues } from '../args.js';

/** --input and --output: what the command does to the rows, and what it writes. */
export function rowFileFlags(verb: string, written: string) {
  return {
    input: { kind: 'string', short: 'i', help: `rows to ${verb}: .csv, .jsonl or .npy (2-D)` },
    output: { kind: 'string', short: 'o', help: `where to write ${written}: .csv, .jsonl or .npy` },
  } as const;
}

/**
 * The command's flags, the model path (the one positional) and both files.
 * @throws UsageError naming the missing model, --input or --output, or an extra positional.
 */
export function parseRowFileArgs<S extends FlagSpecs & ReturnType<typeof rowFileFlags>>(
  argv: readonly string[],
  specs: S,
): { flags: FlagValues<S>; path: string; input: string; output: string } {
  const { flags, positionals } = parseArgs(argv, specs);
  const path = requirePositional(positionals, 0, 'the model file');
  noExtraPositionals(positionals, 1);
  // One typed adapter: S declares input and output as strings (rowFileFlags).
  const files = flags as unknown as { input?: string; output?: string };
  return { flags, path, input: requireFlag(files.input, 'input'), output: requireFlag(files.output, 'output') };
}
