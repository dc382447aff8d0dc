/** Plain-text tables and number formatting for the CLI's human output. */

/** Left-aligned text columns, right-aligned numeric-looking cells. */
export function textTable(header: readonly string[], rows: readonly (readonly string[])[]): string {
  const widths = header.map((h, c) => Math.max(h.length, ...rows.map((r) => (r[c] ?? '').length)));
  const numeric = header.map((_, c) => rows.length > 0 && rows.every((r) => /^[-+]?[\d.,]+(e[-+]?\d+)?%?[a-zA-Z/]*$|^—$/.test(r[c] ?? '')));
  const line = (cells: readonly string[]) =>
    cells
      .map((cell, c) => (numeric[c] ? cell.padStart(widths[c]) : cell.padEnd(widths[c])))
      .join('  ')
      .trimEnd();
  return [line(header), line(widths.map((w) => '-'.repeat(w))), ...rows.map(line)].join('\n') + '\n';
}

/** A compact engineering form for errors and tiny values: 3 significant digits. */
export function sci(value: number): string {
  if (value === 0) return '0';
  if (!Number.isFinite(value)) return String(value);
  return Math.abs(value) >= 1e-3 && Math.abs(value) < 1e5 ? value.toPrecision(3) : value.toExponential(2);
}

export function percent(share: number, digits = 1): string {
  return `${(share * 100).toFixed(digits)}%`;
}

export function bytesText(bytes: number): string {
  if (bytes < 1024) return `${bytes} B`;
  if (bytes < 1024 * 1024) return `${(bytes / 1024).toFixed(1)} KiB`;
  return `${(bytes / 1024 / 1024).toFixed(2)} MiB`;
}

/** 12345678 -> "12,345,678". */
export function grouped(n: number): string {
  return Math.round(n).toLocaleString('en-US');
}
