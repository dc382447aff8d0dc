import { readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, relative, resolve, sep } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

/**
 * The dependency map of DEVELOPERS.md as levels: a module may import only from areas on a lower
 * level (or its own area). Areas on one level never import each other, so engine/ and
 * reference/ stay apart and check/ compares them from outside. Keep the guide's map in step.
 */
const LEVELS: readonly (readonly string[])[] = [
  ['errors', 'report'],
  ['model'],
  ['format', 'spec'],
  ['io'],
  ['engine', 'reference'],
  ['check', 'explain'],
  ['tendon', 'train', 'transform'],
  ['drift'],
  ['serve'],
  ['bench', 'demo'],
  ['cli'],
  ['index'],
];

const SRC = resolve(dirname(fileURLToPath(import.meta.url)), '../../src');

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const path = join(dir, name);
    if (statSync(path).isDirectory()) return sourceFiles(path);
    return name.endsWith('.ts') && !name.endsWith('.d.ts') ? [path] : [];
  });
}

/** The top-level area of a file under src/: its folder, or the file's own name (tendon, errors, index). */
function areaOf(path: string): string {
  const parts = relative(SRC, path).split(sep);
  return parts.length > 1 ? parts[0] : parts[0].replace(/\.ts$/, '');
}

/** Relative module specifiers of static imports, re-exports and dynamic imports. */
export function importedSpecifiers(text: string): string[] {
  const found: string[] = [];
  const patterns = [
    /(?:^|\n)\s*(?:import|export)\s[^;]*?from\s*['"](\.[^'"]+)['"]/g,
    /(?:^|\n)\s*import\s*['"](\.[^'"]+)['"]/g,
    /import\(\s*['"](\.[^'"]+)['"]\s*\)/g,
  ];
  for (const pattern of patterns) for (const m of text.matchAll(pattern)) found.push(m[1]);
  return found;
}

function levelOf(area: string): number {
  return LEVELS.findIndex((level) => level.includes(area));
}

interface Edge {
  readonly file: string;
  readonly from: string;
  readonly to: string;
}

function crossAreaEdges(): Edge[] {
  const edges: Edge[] = [];
  for (const file of sourceFiles(SRC)) {
    const from = areaOf(file);
    for (const spec of importedSpecifiers(readFileSync(file, 'utf8'))) {
      const target = resolve(dirname(file), spec.replace(/\.js$/, '.ts'));
      if (!target.startsWith(SRC + sep)) continue; // e.g. formats/tendon.proto, embedded as text
      const to = areaOf(target);
      if (to !== from) edges.push({ file: relative(SRC, file), from, to });
    }
  }
  return edges;
}

describe('dependency directions (DEVELOPERS.md, "Dependencies point one way")', () => {
  const edges = crossAreaEdges();

  it('finds the imports it checks (the parser sees static, re-export and dynamic imports)', () => {
    expect(
      importedSpecifiers(`import { a } from './a.js';\nexport { b } from '../b/index.js';\nimport './side.js';\nconst c = await import('./c.js');`),
    ).toEqual(['./a.js', '../b/index.js', './side.js', './c.js']);
    // The façade reads files through format/ and runs models through engine/.
    expect(edges).toContainEqual(expect.objectContaining({ from: 'tendon', to: 'engine' }));
    expect(edges.length).toBeGreaterThan(50);
  });

  it('places every area of src/ on the map', () => {
    const unplaced = [...new Set(sourceFiles(SRC).map(areaOf))].filter((a) => levelOf(a) < 0);
    expect(unplaced).toEqual([]);
  });

  it('every import between areas points to a lower level', () => {
    const upward = edges.filter((e) => levelOf(e.to) >= levelOf(e.from)).map((e) => `${e.file}: ${e.from} -> ${e.to}`);
    expect(upward).toEqual([]);
  });
});
