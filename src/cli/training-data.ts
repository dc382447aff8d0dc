/**
 * Reading a data file for training: feature columns matched to the model, target columns
 * turned into class indices (from an index or a label name) or regression values matched to
 * the model's output labels. Rows go straight into float32 buffers, chunk by chunk, so a large
 * file is held once, as float32, and never as a float64 table.
 */
import { DataError } from '../errors.js';
import { openTable, resolveColumns, shownCell, shownNames, type ColumnRef, type TableReader } from '../io/index.js';
import { modelWidths, outputsAreClasses, type ModelDoc } from '../model/index.js';
import type { TuneData } from '../train/config.js';
import { namedColumns, otherColumns, tableLayout } from './model-input.js';

type Layout = Pick<TableReader, 'columns' | 'width'>;

/** Rows per chunk while loading: small, so the float64 chunk and the cell text stay small. */
const TRAINING_CHUNK_ROWS = 256;

/**
 * Bytes a text reader may have read past the rows it handed out (a stream piece and the one
 * queued), left out when guessing the file's row count from the share read so far.
 */
const READ_AHEAD_BYTES = 128 * 1024;

/**
 * Load `file` as training rows for `doc`. `targets` names the target column(s) by header name
 * or 0-based position. Feature columns: matched by name when the model has feature names and
 * the file a header; otherwise every other named column, in order. Columns that are neither
 * are never parsed. `warn` hears about data that trains badly (a single class).
 * @throws DataError naming the file, line and column of a bad cell, an unknown column, a class
 *   the model does not know, or target names that are not the model's output labels.
 */
export async function loadTrainingData(doc: ModelDoc, file: string, targets: readonly string[], warn: (message: string) => void = () => {}): Promise<TuneData> {
  const classes = outputsAreClasses(doc);
  const refs: ColumnRef[] = targets.map((t) => (/^\d+$/.test(t) ? Number(t) : t));
  const layout = await tableLayout(file);
  const widths = modelWidths(doc);
  const outputs = widths[widths.length - 1];
  let targetCols = resolveColumns(layout.columns, layout.width, refs, file);
  const featureCols = featureColumns(doc, layout, targetCols, file);
  if (classes) {
    if (targetCols.length !== 1) throw new DataError(file, 0, 0, `a classifier takes one target column, got ${targetCols.length} (${targets.join(', ')})`);
  } else {
    targetCols = targetsInLabelOrder(doc, refs, targetCols, outputs, file);
  }
  const table = await openTable(file, {
    // Small chunks: each is float64 and short-lived; the rows are kept only as float32.
    chunkRows: TRAINING_CHUNK_ROWS,
    header: layout.columns !== null,
    textColumns: classes ? targetCols : [],
    skipColumns: otherColumns(layout.width, [...featureCols, ...targetCols]),
  });
  const inputs = doc.inputs;
  const x = new GrowingRows(Float32Array, inputs, table);
  const y = classes ? new GrowingRows(Int32Array, 1, table) : new GrowingRows(Float32Array, outputs, table);
  const reader = classes ? new ClassReader(doc.labels, outputs, file, targetCols[0], table.columns?.[targetCols[0]] ?? null) : null;
  let rows = 0;
  try {
    for await (const chunk of table.chunks()) {
      const xs = x.room(chunk.rows);
      const ys = y.room(chunk.rows);
      const at = x.rows;
      const width = table.width;
      const data = chunk.data;
      for (let r = 0; r < chunk.rows; r++) {
        const from = r * width;
        const to = (at + r) * inputs;
        for (let c = 0; c < featureCols.length; c++) xs[to + c] = data[from + featureCols[c]];
      }
      if (reader) {
        const cells = chunk.text!.get(targetCols[0])!;
        for (let r = 0; r < chunk.rows; r++) {
          const index = reader.read(cells[r], rows + r);
          if (index === null) throw await reader.refusal(cells[r], rows + r);
          ys[at + r] = index;
        }
      } else {
        for (let r = 0; r < chunk.rows; r++) {
          for (let k = 0; k < outputs; k++) ys[(at + r) * outputs + k] = data[r * width + targetCols[k]];
        }
      }
      x.rows += chunk.rows;
      y.rows += chunk.rows;
      rows += chunk.rows;
    }
  } finally {
    await table.close();
  }
  if (reader) {
    const mixed = reader.mixed();
    if (mixed) throw await mixed();
    const single = reader.singleClass(y.result() as Int32Array, rows);
    if (single) warn(`${file}: ${single}`);
  }
  return { x: x.result(), rows, y: y.result() };
}

function featureColumns(doc: ModelDoc, layout: Layout, targetCols: readonly number[], file: string): number[] {
  if (doc.features && layout.columns) {
    const missing = doc.features.filter((f) => !layout.columns!.includes(f));
    if (missing.length === 0) return resolveColumns(layout.columns, layout.width, doc.features, file);
    throw new DataError(
      file,
      1,
      0,
      `missing feature column${missing.length > 1 ? 's' : ''} ${shownNames(missing)} (the header has: ${shownNames(layout.columns.filter((c) => c !== ''))})`,
    );
  }
  const rest = namedColumns(layout).filter((i) => !targetCols.includes(i));
  if (rest.length !== doc.inputs) {
    throw new DataError(file, 1, 0, `has ${rest.length} feature columns besides the target, but the model takes ${doc.inputs} inputs`);
  }
  return rest;
}

/**
 * Regression targets in the order of the model's outputs. When the model has output labels,
 * it has several outputs and every target is given by name, the names are matched to the
 * labels (any order); names that are not labels are refused, never read by position. Targets
 * given by position, or a model without labels, are taken in the order given.
 */
function targetsInLabelOrder(doc: ModelDoc, refs: readonly ColumnRef[], targetCols: readonly number[], outputs: number, file: string): number[] {
  const given = refs.map(String).join(', ');
  if (targetCols.length !== outputs) {
    throw new DataError(file, 0, 0, `the model has ${outputs} outputs, so --target needs ${outputs} columns, got ${targetCols.length} (${given})`);
  }
  const labels = doc.labels;
  if (!labels || outputs === 1 || !refs.every((r) => typeof r === 'string')) return [...targetCols];
  const names = refs as readonly string[];
  const unknown = names.filter((n) => !labels.includes(n));
  if (unknown.length > 0) {
    throw new DataError(
      file,
      0,
      0,
      `--target ${shownNames(unknown)} ${unknown.length > 1 ? 'are' : 'is'} not among the model's output labels (${shownNames(labels)}); name the columns after the labels, or give the targets by position (0-based) to take them in the order given`,
    );
  }
  return labels.map((label) => targetCols[names.indexOf(label)]);
}

/**
 * A float32 or int32 buffer of rows x width that grows as chunks arrive. Its size is guessed
 * from the share of the file read so far, generously, so a file is normally held in one
 * buffer and never copied while it grows.
 */
class GrowingRows<T extends Float32Array | Int32Array> {
  rows = 0;
  private buffer: T;

  constructor(
    private readonly make: new (length: number) => T,
    private readonly width: number,
    private readonly table: Pick<TableReader, 'bytesRead' | 'bytesTotal'>,
  ) {
    this.buffer = new make(0);
  }

  /** The buffer, with room for `more` rows after the ones held. */
  room(more: number): T {
    const need = (this.rows + more) * this.width;
    if (need <= this.buffer.length) return this.buffer;
    const { bytesRead, bytesTotal } = this.table;
    // Rows expected in the whole file, from the rows per byte seen so far, plus a margin. The
    // margin costs little: pages of the buffer that are never written are never resident.
    const consumed = Math.max(bytesRead - READ_AHEAD_BYTES, bytesRead / 2, 1);
    const expected = bytesRead >= bytesTotal ? this.rows + more : Math.ceil((((this.rows + more) * bytesTotal) / consumed) * 1.15);
    const grown = new this.make(Math.max(need, expected * this.width, Math.ceil(this.buffer.length * 1.25)));
    grown.set(this.buffer.subarray(0, this.rows * this.width));
    this.buffer = grown;
    return grown;
  }

  result(): T {
    return this.buffer.subarray(0, this.rows * this.width) as T;
  }
}

/** How a class cell was read when only one reading fits: by a label name, or by an index. */
type ReadAs = 'name' | 'index';

/**
 * Class cells to class indices. A cell is a label name the model knows, or a whole-number
 * index (`2`, or `2.0` as dataframe libraries write whole floats). For one sigmoid output
 * (two classes, one label) the label names the positive class, 1, and the other class is
 * written 0. A column writes its classes all by name or all by index: a mix is refused (files
 * joined from two conventions, or a label taken for the wrong class), except the unnamed 0 of a
 * one-label sigmoid. A cell that reads as one class by name and another by index is refused.
 */
class ClassReader {
  private readonly names = new Map<string, number>();
  private readonly classCount: number;
  private firstBy: Partial<Record<ReadAs, { row: number; cell: string }>> = {};
  private readonly header: boolean;
  private conflict: { cell: string; byName: number; byIndex: number } | null = null;

  constructor(
    private readonly labels: readonly string[] | null,
    outputs: number,
    private readonly file: string,
    /** 0-based position of the target column, and its header name when it has one. */
    private readonly position: number,
    private readonly name: string | null,
  ) {
    this.header = name !== null;
    this.classCount = outputs === 1 ? 2 : outputs;
    if (labels) {
      // One sigmoid output: its one label is the positive class.
      if (outputs === 1 && labels.length === 1) this.names.set(labels[0], 1);
      else labels.forEach((label, i) => this.names.set(label, i));
    }
  }

  /** The class of `cell` (data row `row`, 0-based), or null when the model does not know it. */
  read(cell: string, row: number): number | null {
    const text = cell.trim();
    const byName = this.names.get(text);
    const byIndex = /^\d+(\.0*)?$/.test(text) && Number(text) < this.classCount ? Number(text) : undefined;
    if (byName !== undefined && byIndex !== undefined && byName !== byIndex) {
      this.conflict = { cell: text, byName, byIndex };
      return null;
    }
    if (byName === undefined && byIndex === undefined) return null;
    // Class 0 of a one-label sigmoid has no name: writing it 0 beside the label is the rule.
    const unnamedClass = byName === undefined && byIndex !== undefined && ![...this.names.values()].includes(byIndex);
    if ((byName === undefined || byIndex === undefined) && !unnamedClass) {
      const by: ReadAs = byName !== undefined ? 'name' : 'index';
      this.firstBy[by] ??= { row, cell: text };
    }
    return byName ?? byIndex!;
  }

  /** The error for a cell `read` refused. */
  async refusal(cell: string, row: number): Promise<DataError> {
    const line = await lineOfRow(this.file, row, this.header);
    const at = this.position + 1;
    if (this.conflict) {
      const c = this.conflict;
      return new DataError(
        this.file,
        line,
        at,
        `class ${shownCell(c.cell)} is ambiguous: it is the label of class ${c.byName} and also the index ${c.byIndex}; write the classes by index only`,
      );
    }
    return new DataError(this.file, line, at, `class ${shownCell(cell.trim())} is not one the model knows (${this.known()})`);
  }

  /** A refusal to throw when the column mixed names and indices while every class has a name. */
  mixed(): (() => Promise<DataError>) | null {
    const { name, index } = this.firstBy;
    if (!name || !index) return null;
    return async () => {
      const [nameLine, indexLine] = [await lineOfRow(this.file, name.row, this.header), await lineOfRow(this.file, index.row, this.header)];
      return new DataError(
        this.file,
        indexLine,
        this.position + 1,
        `column ${this.shownColumn()} mixes class names and indices (${shownCell(name.cell)} on line ${nameLine}, ${shownCell(index.cell)} on line ${indexLine}); write every class the same way`,
      );
    };
  }

  /** A warning when every row is one class, or null. */
  singleClass(y: Int32Array, rows: number): string | null {
    if (rows === 0 || y.some((c) => c !== y[0])) return null;
    const label = [...this.names].find(([, i]) => i === y[0])?.[0];
    return `every one of the ${rows} target cells in column ${this.shownColumn()} is class ${y[0]}${label !== undefined ? ` (${shownCell(label)})` : ''}: the model cannot learn to tell classes apart from these rows`;
  }

  private known(): string {
    const range = `indices 0..${this.classCount - 1}`;
    if (!this.labels) return range;
    if (this.classCount === 2 && this.labels.length === 1) return `${shownCell(this.labels[0])} for class 1, or ${range}`;
    return `labels ${shownNames(this.labels)} or ${range}`;
  }

  private shownColumn(): string {
    return this.name ? shownCell(this.name) : String(this.position + 1);
  }
}

/**
 * The 1-based file line of data row `row` (0-based). Blank lines and quoted cells that span
 * lines make it differ from row + header, so the file is read again, one row per chunk (each
 * chunk names its first line), parsing nothing. Only on the error path.
 */
async function lineOfRow(file: string, row: number, header: boolean): Promise<number> {
  const layout = await tableLayout(file);
  const table = await openTable(file, { chunkRows: 1, header, skipColumns: otherColumns(layout.width, []) });
  try {
    let r = 0;
    for await (const chunk of table.chunks()) if (r++ === row) return chunk.firstLine;
  } finally {
    await table.close();
  }
  return 0;
}
