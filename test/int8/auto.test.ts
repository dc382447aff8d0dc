// Engine choice for integer models: 'auto' runs an i8-stored file on the int8 engine and says so;
// a float32 file is never quantised unless int8 is asked for by name.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { docOf, randomDense, zscoreOf } from '../fixtures/models.js';
import { engineNote, openModel } from '../../src/tendon.js';
import { writeModelFile } from '../../src/format/index.js';
import { SeededRng } from '../../src/model/index.js';
import { shrinkModel } from '../../src/transform/shrink.js';
import { bestInt8Arith, INT8_KERNEL_NAMES } from '../../src/engine/int8/kernels.js';
import { machineLine } from '../../src/engine/cpu-flags.js';
import { runCli } from '../cli/run-cli.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-int8-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe('engine choice for i8 files', () => {
  const rng = new SeededRng(6);
  const f32 = docOf(10, [randomDense(rng, 10, 24, 'relu'), randomDense(rng, 24, 3, 'softmax')], zscoreOf(rng, 10));

  it('auto opens an i8-stored file on the int8 engine, names the kernel and passes its own parity check', async () => {
    const path = join(dir, 'small-i8.tendon');
    await writeModelFile(path, shrinkModel(f32, 'i8'));
    const model = await openModel(path);
    expect(model.engine).toBe('int8');
    expect(engineNote()).toMatch(/int8 engine .* for a model stored as i8/);
    expect(model.kernel).toMatch(/dot/);
    const report = model.check();
    model.dispose();
    expect(report.pass).toBe(true);
  });

  it('auto keeps a float32 file on the float32 kernel; --engine int8 quantises it only when asked', async () => {
    const path = join(dir, 'small-f32.tendon');
    await writeModelFile(path, f32);
    const auto = await openModel(path);
    expect(auto.engine).toBe('fast');
    expect(engineNote()).toBeNull();
    auto.dispose();
    const asked = await openModel(path, { engine: 'int8' });
    expect(asked.engine).toBe('int8');
    asked.dispose();
  });

  it('tendon bench names the int8 kernel that ran and the machine before its table', async () => {
    const path = join(dir, 'bench-i8.tendon');
    await writeModelFile(path, shrinkModel(f32, 'i8'));
    const r = await runCli('bench', path, '--batch', '1,4', '--ms', '5');
    expect(r.code).toBe(0);
    const [first, header] = r.out.split('\n');
    expect(first).toBe(`int8 engine: ${INT8_KERNEL_NAMES[bestInt8Arith() ?? 'i16']}, one thread; ${machineLine()}`);
    expect(first).toContain(`Node ${process.version}`);
    expect(header).toMatch(/^engine\s+batch\s+rows\/s/);
    // --json stays rows only, for scripts.
    const json = await runCli('bench', path, '--batch', '1', '--ms', '5', '--json');
    expect(JSON.parse(json.out)).toHaveLength(1);
  });
});
