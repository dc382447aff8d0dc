/** What the CPU offers the kernels, as the operating system lists it. */
import { readFileSync } from 'node:fs';
import { availableParallelism, cpus } from 'node:os';

let flags: ReadonlySet<string> | null = null;

/** The CPU's feature flags as Linux lists them in /proc/cpuinfo (read once); empty elsewhere. */
export function cpuFlags(): ReadonlySet<string> {
  if (flags) return flags;
  try {
    const line = /^flags\s*:(.*)$/m.exec(readFileSync('/proc/cpuinfo', 'latin1'))?.[1] ?? '';
    flags = new Set(line.trim().split(/\s+/).filter(Boolean));
  } catch {
    flags = new Set();
  }
  return flags;
}

/**
 * The vector features that decide the kernels' and numpy's speed (avx2, avx512f, avx512_vnni,
 * avx_vnni and the like), for every bench line; "unknown" where they cannot be read.
 * @example vectorFeatures() // "fma sse4_2 avx avx2 avx512f avx512bw avx512vl avx_vnni avx512_vnni"
 */
export function vectorFeatures(): string {
  const wanted = [...cpuFlags()].filter((f) => /^(sse4_2|avx|avx2|fma|avx512f|avx512bw|avx512vl|avx512_vnni|avx_vnni|amx_int8)$/.test(f));
  return wanted.length ? wanted.join(' ') : 'unknown';
}

/**
 * The machine in one line, as bench output names it.
 * @example machineLine() // "AMD EPYC, 2 cores, vector: fma sse4_2 avx avx2 ..., Node v20.20.2"
 */
export function machineLine(): string {
  return `${cpus()[0]?.model.trim() ?? 'unknown CPU'}, ${availableParallelism()} cores, vector: ${vectorFeatures()}, Node ${process.version}`;
}
