/** Run the CLI in-process and capture what it prints. */
import { main } from '../../src/cli/main.js';

export interface CliResult {
  readonly code: number;
  readonly out: string;
  readonly err: string;
}

export async function runCli(...argv: string[]): Promise<CliResult> {
  let out = '';
  let err = '';
  const code = await main(argv, {
    out: (t) => void (out += t),
    err: (t) => void (err += t),
    interactive: false,
    signal: new AbortController().signal,
  });
  return { code, out, err };
}
