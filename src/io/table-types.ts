/**
 * The shapes every table reader hands out, whatever the file format.
 */

/** Formats `openTable` reads. */
export const TABLE_FORMATS = ['csv', 'jsonl', 'npy'] as const;
export type TableFormat = (typeof TABLE_FORMATS)[number];

/** Cell separators a CSV file may use. */
export type CsvSeparator = ',' | ';' | '\t';

/** A column given by header name or by 0-based position. */
export type ColumnRef = string | number;

export interface TableOptions {
  /** File format; taken from the extension when left out. */
  format?: TableFormat;
  /** Rows per chunk handed out by `chunks()` (default 4096; fewer when rows are so wide that a chunk would pass MAX_CHUNK_VALUES). */
  chunkRows?: number;
  /**
   * Columns kept as text instead of parsed as numbers (class labels such as "good"). Their slots
   * in `data` hold NaN so that column positions stay the same; their cells come in `text`.
   */
  textColumns?: readonly ColumnRef[];
  /**
   * Columns never read: their cells are not parsed (any text, empty, or in JSONL any value or
   * no key at all) and their slots in `data` hold NaN. For IDs, notes, blank label columns.
   */
  skipColumns?: readonly ColumnRef[];
  /**
   * CSV only: the cell separator. Left out, it is sniffed from the first line: a comma if it
   * holds one (outside quotes), else a semicolon if it holds one, else a tab if it holds one,
   * else a comma. `.tsv` files are read with a tab.
   */
  separator?: CsvSeparator;
  /**
   * CSV only: whether the first row is a header. Left out, it is a header when any of its
   * cells (outside text columns given by position) is not a number.
   */
  header?: boolean;
}

/** Rows read from a table, `rows x width`, row-major. */
export interface TableChunk {
  rows: number;
  data: Float64Array;
  /** 1-based line of the first row in the file (for NPY: the 1-based row number). */
  firstLine: number;
  /** Cells of the text columns, by column position; present only when text columns were asked for. */
  text?: Map<number, string[]>;
}

/** A table being read chunk by chunk, so memory stays bounded whatever the file size. */
export interface TableReader {
  /** Column names from the header or object keys; null when the file has none. */
  readonly columns: string[] | null;
  readonly width: number;
  /** Positions of the text columns (see `TableOptions.textColumns`). */
  readonly textColumns: readonly number[];
  /** Bytes of the file read so far, and the file's size: for progress bars. */
  readonly bytesRead: number;
  readonly bytesTotal: number;
  /** Rows in the file when its header declares them (NPY); absent when only reading tells (CSV, JSONL). */
  readonly rowsTotal?: number;
  /** Yields the rows in order. Can be iterated once. */
  chunks(): AsyncIterable<TableChunk>;
  /** Releases the file; safe to call twice or mid-iteration. */
  close(): Promise<void>;
}

/** A whole table in memory. */
export interface LoadedTable {
  columns: string[] | null;
  rows: number;
  width: number;
  /** rows x width, row-major; NaN in text columns. */
  data: Float64Array;
  /** Cells of the text columns, by column position. Empty when none were asked for. */
  text: Map<number, string[]>;
}

/** Default rows per chunk: 4096 rows of 64 float64 columns is 2 MiB. */
export const DEFAULT_CHUNK_ROWS = 4096;

/** A chunk holds at most this many values (32 MiB of float64), however wide the rows. */
export const MAX_CHUNK_VALUES = 1 << 22;

/** Rows per chunk: as asked, but fewer for very wide rows so a chunk stays within MAX_CHUNK_VALUES. */
export function rowsPerChunk(width: number, chunkRows = DEFAULT_CHUNK_ROWS): number {
  return Math.max(1, Math.min(chunkRows, Math.floor(MAX_CHUNK_VALUES / Math.max(1, width))));
}
