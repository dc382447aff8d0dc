/** A request the endpoint refuses: its HTTP status, a message naming what is wrong, extra headers. */
export class HttpProblem extends Error {
  constructor(
    readonly status: number,
    message: string,
    readonly headers: Readonly<Record<string, string>> = {},
  ) {
    super(message);
  }
  override get name(): string {
    return 'HttpProblem';
  }
}
