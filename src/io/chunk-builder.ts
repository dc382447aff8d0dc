/**
 * Fills fixed-size row chunks from rows arriving one at a time (CSV and JSONL readers).
 */
import type { TableChunk } from './table-types.js';

export class ChunkBuilder {
  private data: Float64Array;
  private text: Map<number, string[]> | undefined;
  private rows = 0;
  private firstLine = 0;

  constructor(
    readonly width: number,
    readonly chunkRows: number,
    private readonly textColumns: readonly number[],
  ) {
    this.data = new Float64Array(width * chunkRows);
    this.text = this.freshText();
  }

  /** Starts a row; returns the offset in `values` where its first cell goes. */
  startRow(line: number): number {
    if (this.rows === 0) this.firstLine = line;
    const offset = this.rows * this.width;
    this.rows++;
    return offset;
  }

  /** The chunk being filled. Write a row's numbers at the offset `startRow` returned. */
  get values(): Float64Array {
    return this.data;
  }

  setText(column: number, cell: string): void {
    this.data[(this.rows - 1) * this.width + column] = Number.NaN;
    this.text?.get(column)?.push(cell);
  }

  get full(): boolean {
    return this.rows === this.chunkRows;
  }

  /** Hands out the rows gathered so far (null when none) and starts a new chunk. */
  take(): TableChunk | null {
    if (this.rows === 0) return null;
    const chunk: TableChunk = {
      rows: this.rows,
      // A fresh array per chunk: callers may keep chunks, so the buffer is never reused.
      data: this.rows === this.chunkRows ? this.data : this.data.slice(0, this.rows * this.width),
      firstLine: this.firstLine,
    };
    if (this.text) chunk.text = this.text;
    this.data = new Float64Array(this.width * this.chunkRows);
    this.text = this.freshText();
    this.rows = 0;
    return chunk;
  }

  private freshText(): Map<number, string[]> | undefined {
    if (this.textColumns.length === 0) return undefined;
    return new Map(this.textColumns.map((c) => [c, []]));
  }
}
