/**
 * Every error a user can cause is a TendonError with an exit code and, where one helps, a hint;
 * the CLI prints message and hint as one line. Asking for the fast engine on a runtime without
 * WebAssembly SIMD is one of them, not an internal error.
 */
import { describe, expect, it, vi } from 'vitest';
import { DivergenceError, EngineUnavailableError, TendonError, UsageError } from '../../src/errors.js';
import { BusyError } from '../../src/serve/batcher.js';
import { HttpProblem } from '../../src/serve/http-problem.js';
import { report } from '../../src/cli/main.js';
import { runCli } from './run-cli.js';

vi.mock('../../src/engine/fast/dense-kernel.js', async (original) => ({
  ...(await original<typeof import('../../src/engine/fast/dense-kernel.js')>()),
  // This file plays a runtime without WebAssembly SIMD.
  wasmSimdAvailable: () => false,
}));

function printed(error: unknown): { code: number; err: string } {
  let err = '';
  const code = report(error, { err: (t) => void (err += t) });
  return { code, err };
}

describe('typed errors with a hint, one line on the command line', () => {
  it('--engine fast without WebAssembly SIMD is an EngineUnavailableError, exit 2, with a hint', async () => {
    const { resolveEngine } = await import('../../src/engine/choice.js');
    const caught = await resolveEngine('fast').catch((e: unknown) => e);
    expect(caught).toBeInstanceOf(EngineUnavailableError);
    expect((caught as EngineUnavailableError).engine).toBe('fast');
    const { code, err } = printed(caught);
    expect(code).toBe(2);
    expect(err).toBe(
      'tendon: the fast engine cannot run here: it needs WebAssembly SIMD, which this runtime lacks ' +
        '(hint: use --engine auto, which falls back to the next engine that runs, or name another (fast, wasm, js))\n',
    );
    expect(err).not.toMatch(/internal error|TENDON_DEBUG/);
  });

  it("'auto' on the same runtime falls back and says why instead of refusing", async () => {
    const { resolveEngine } = await import('../../src/engine/choice.js');
    const resolved = await resolveEngine('auto');
    expect(resolved.engine).not.toBe('fast');
    expect(resolved.fallback).toMatch(/WebAssembly SIMD unavailable/);
  });

  it('the busy, divergence and HTTP errors share the root class and its exit codes', () => {
    const busy = new BusyError(10, 5, 12);
    const diverged = new DivergenceError(2, 7, 'layer 0 (dense)', 'loss is NaN', 'nothing saved');
    expect(busy).toBeInstanceOf(TendonError);
    expect(busy.exitCode).toBe(1);
    expect(busy.hint).toMatch(/retry/);
    expect(diverged).toBeInstanceOf(TendonError);
    expect(diverged.hint).toMatch(/--lr/);
    expect(new HttpProblem(400, 'rows: bad')).toBeInstanceOf(TendonError);
    expect(new HttpProblem(400, 'rows: bad').exitCode).toBe(2);
    expect(new HttpProblem(503, 'busy').exitCode).toBe(1);
    expect(new HttpProblem(404, 'no route').name).toBe('HttpProblem');
  });

  it('an error without a hint prints its message alone; withHint adds one', () => {
    expect(printed(new UsageError('--x', 'bad')).err).toBe('tendon: --x: bad\n');
    expect(printed(new UsageError('--x', 'bad').withHint('try --y')).err).toBe('tendon: --x: bad (hint: try --y)\n');
  });

  it("a usage error from a command points at that command's --help", async () => {
    const r = await runCli('about', 'm.tendon', '--colour');
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/^tendon: --colour: unknown option .*\(hint: tendon about --help lists its options\)\n$/);
    const unknown = await runCli('frobnicate');
    expect(unknown.err).toMatch(/\(hint: tendon help lists the commands\)\n$/);
  });
});
