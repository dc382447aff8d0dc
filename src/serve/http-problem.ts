import { TendonError, type ExitCode } from '../errors.js';

/**
 * A request the endpoint refuses: its HTTP status, a message naming what is wrong, extra headers.
 * A 4xx is the client's doing (exit code 2 where a command reports it), a 5xx a failure while working (1).
 */
export class HttpProblem extends TendonError {
  readonly exitCode: ExitCode;
  constructor(
    readonly status: number,
    message: string,
    readonly headers: Readonly<Record<string, string>> = {},
  ) {
    super(message);
    this.exitCode = status >= 500 ? 1 : 2;
  }
}
