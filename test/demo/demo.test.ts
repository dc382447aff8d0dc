/**
 * The demo's story holds on its invented, seeded data: the trained model proves parity, and
 * fine-tuning for the second site with anchor + replay forgets less of the first site than
 * plain fine-tuning while still lifting the second. (Invented data: this pins the demo's
 * behaviour, not a fact about the world.)
 */
import { mkdtemp, readdir } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { runDemo } from '../../src/demo/story.js';

describe('tendon demo', () => {
  it('tells the two-bakery story with numbers that support it', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'tendon-demo-test-'));
    const lines: string[] = [];
    const outcome = await runDemo({ dir, seed: 7, engine: 'js', say: (l) => lines.push(l) });
    expect(outcome.parityPass).toBe(true);
    const [before, plain, , guarded] = outcome.table;
    expect(before.first).toBeGreaterThan(0.75);
    expect(plain.second).toBeGreaterThan(before.second + 0.2);
    expect(guarded.second).toBeGreaterThan(before.second + 0.2);
    expect(guarded.first).toBeGreaterThan(plain.first);
    const files = await readdir(dir);
    expect(files).toEqual(expect.arrayContaining(['bakery-fresh.tendon', 'bakery-northgate.tendon', 'bakery-riverside.tendon', 'northgate-loaves.csv']));
    expect(lines.join('\n')).toContain('PASS');
  });
});
