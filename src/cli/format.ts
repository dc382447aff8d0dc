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
  // By hand, not toLocaleString: its first call sets up ICU number formatting, about 0.1 s of a command's start.
  return String(Math.round(n)).replace(/\B(?=(\d{3})+(?!\d))/g, ',');
}

/** Past this many names a list is abbreviated to its ends. */
const LISTED_NAMES = 40;

/**
 * A list of names after a label, for people: one line when it fits `width`, wrapped under the
 * label up to LISTED_NAMES names, else the first and last few with the count (every name is in
 * --json).
 * @example namesText('inputs 4: ', ['a', 'b', 'c', 'd']) // "inputs 4: a, b, c, d"
 */
export function namesText(label: string, names: readonly string[], width = 100): string {
  const flat = label + names.join(', ');
  if (flat.length <= width) return flat;
  if (names.length > LISTED_NAMES) {
    return `${label}${names.slice(0, 6).join(', ')}, ... ${names.slice(-2).join(', ')} (${names.length - 8} more between; all in --json)`;
  }
  const indent = ' '.repeat(label.length);
  const lines: string[] = [];
  let line = label;
  let empty = true;
  names.forEach((name, i) => {
    const piece = name + (i < names.length - 1 ? ',' : '');
    if (!empty && line.length + 1 + piece.length > width) {
      lines.push(line);
      line = indent;
      empty = true;
    }
    line += (empty ? '' : ' ') + piece;
    empty = false;
  });
  lines.push(line);
  return lines.join('\n');
}
