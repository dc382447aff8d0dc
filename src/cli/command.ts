/** What every CLI command file exports. */
import type { FlagSpecs } from './args.js';

export interface Io {
  out(text: string): void;
  err(text: string): void;
  /** True when stdout is a terminal (progress bars); false in pipes and tests. */
  readonly interactive: boolean;
  /** Aborted on Ctrl-C so long commands can stop cleanly. */
  readonly signal: AbortSignal;
}

export interface Command {
  /** Its one-line summary lives beside its name in commands/index.ts. */
  readonly name: string;
  readonly usage: string;
  readonly flags: FlagSpecs;
  /** Returns the exit code: 0 ok, 1 failure while working, 2 bad input or usage. */
  run(argv: readonly string[], io: Io): Promise<number>;
}
