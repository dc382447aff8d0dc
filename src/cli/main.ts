/**
 * The `tendon` command. Every user-caused error reaches the terminal as one line and an exit
 * code (0 ok, 1 failure while working, 2 bad input or usage), never a stack trace.
 */
import { TendonError, UsageError } from '../errors.js';
import { describeFlags } from './args.js';
import type { Io } from './command.js';
import { commands, type CommandEntry } from './commands/index.js';

export async function main(argv: readonly string[], io: Io): Promise<number> {
  const [name, ...rest] = argv;
  if (!name || name === 'help' || name === '--help' || name === '-h') {
    io.out(overview(commands));
    return name ? 0 : 2;
  }
  if (name === '--version') {
    io.out(`tendon ${VERSION}\n`);
    return 0;
  }
  const entry = commands.find((c) => c.name === name);
  try {
    if (!entry) {
      throw new UsageError('', `unknown command "${name}" (commands: ${commands.map((c) => c.name).join(', ')})`);
    }
    const command = await entry.load();
    if (rest.includes('--help') || rest.includes('-h')) {
      io.out(`usage: ${command.usage}\n\n${entry.summary}\n\n${describeFlags(command.flags)}\n`);
      return 0;
    }
    return await command.run(rest, io);
  } catch (error) {
    if (error instanceof UsageError && !error.hint) {
      error.withHint(entry ? `tendon ${entry.name} --help lists its options` : 'tendon help lists the commands');
    }
    return report(error, io);
  }
}

/** One line on stderr, the message then what to do about it; the exit code comes from the error's kind. */
export function report(error: unknown, io: Pick<Io, 'err'>): number {
  if (error instanceof TendonError) {
    io.err(`tendon: ${oneLine(error.message)}${error.hint ? ` (hint: ${oneLine(error.hint)})` : ''}\n`);
    return error.exitCode;
  }
  const message = error instanceof Error ? error.message : String(error);
  io.err(`tendon: internal error: ${oneLine(message)} (set TENDON_DEBUG=1 for details)\n`);
  if (process.env.TENDON_DEBUG && error instanceof Error) io.err(`${error.stack}\n`);
  return 1;
}

function oneLine(text: string): string {
  return text.replace(/\s*\n\s*/g, ' ');
}

function overview(list: readonly CommandEntry[]): string {
  const width = Math.max(...list.map((c) => c.name.length));
  return [
    'tendon — ship, run, fine-tune, prove and measure small dense networks on the CPU',
    '',
    'usage: tendon <command> [options]   (tendon <command> --help for its options)',
    '',
    ...list.map((c) => `  ${c.name.padEnd(width)}  ${c.summary}`),
    '',
  ].join('\n');
}

declare const __TENDON_VERSION__: string | undefined;
const VERSION = typeof __TENDON_VERSION__ === 'string' ? __TENDON_VERSION__ : '0.1.0';

/** Entry point when run as a program (dist/cli.js). */
export async function runAsProgram(): Promise<void> {
  const controller = new AbortController();
  let interrupts = 0;
  process.on('SIGINT', () => {
    interrupts++;
    if (interrupts > 1) process.exit(130);
    process.stderr.write('\ntendon: stopping after the current step (Ctrl-C again to quit now)\n');
    controller.abort();
  });
  const io: Io = {
    out: (t) => void process.stdout.write(t),
    err: (t) => void process.stderr.write(t),
    interactive: Boolean(process.stdout.isTTY),
    signal: controller.signal,
  };
  const code = await main(process.argv.slice(2), io);
  process.exitCode = code;
}
