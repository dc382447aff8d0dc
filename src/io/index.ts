/** Data file input and output: CSV, JSONL, NPY and IDX readers, table writers. */
export { openTable, readTable, tableFormatOf } from './table.js';
export { resolveColumns, selectColumns } from './columns.js';
export {
  TABLE_FORMATS,
  DEFAULT_CHUNK_ROWS,
  type TableFormat,
  type ColumnRef,
  type TableOptions,
  type TableChunk,
  type TableReader,
  type LoadedTable,
} from './table-types.js';
export { openCsvTable, readCsvBatches } from './csv.js';
export { CsvTokenizer, type CsvRecord } from './csv-tokenizer.js';
export { openJsonlTable, parseJsonLine } from './jsonl.js';
export {
  readNpy,
  decodeNpy,
  decodeNpyHeader,
  encodeNpy,
  writeNpy,
  openNpyTable,
  openNpyFloat32Rows,
  openNpyRowWriter,
  type Float32RowReader,
  type NpyArray,
  type NpyWriteDtype,
  type NpyRowWriter,
} from './npy.js';
export { formatNpyHeader, parseNpyDict, type NpyHeader } from './npy-header.js';
export { readIdx, decodeIdx, type IdxArray, type IdxData } from './idx.js';
export { openTableWriter, type TableWriter, type TableWriterOptions } from './writers.js';
export { parseNumberCell, formatFloat32, formatFloat64 } from './numbers.js';
export { shownCell, shownNames } from './file-errors.js';
