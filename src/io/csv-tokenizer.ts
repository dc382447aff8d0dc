/**
 * RFC 4180 record splitting over text that arrives in chunks. Pure: no I/O, so it can be fed
 * a whole string in a test or 64 KiB pieces from a file stream.
 */
import { DataError } from '../errors.js';

/** One CSV record: its cells as text and the 1-based line where it starts. */
export interface CsvRecord {
  readonly cells: string[];
  readonly line: number;
}

const QUOTE = 34;
const LF = 10;
const CR = 13;

/** A single cell larger than this is almost surely not CSV (a binary file, a missing quote). */
export const MAX_CELL_CHARS = 128 * 1024 * 1024;

const enum State {
  FieldStart,
  Unquoted,
  Quoted,
  /** A quote seen inside a quoted cell: the next character tells a doubled quote from a close. */
  QuoteInQuoted,
}

/**
 * Splits CSV text into records. Feed it with `push`, finish with `end`; both return the records
 * completed so far. Accepts LF, CRLF and lone CR line ends, strips a leading UTF-8 BOM, skips
 * blank lines, and does not need a newline after the last record.
 *
 * @example
 * const t = new CsvTokenizer('a.csv');
 * t.push('x,"y ""q"""\r\n1,');
 * t.end(); // [{ cells: ['1', ''], line: 2 }] after the first push returned the header record
 */
export class CsvTokenizer {
  private state = State.FieldStart;
  private line = 1;
  private recordLine = 1;
  private cells: string[] = [];
  /** Text of the current cell carried over from earlier chunks (or before a doubled quote). */
  private pending = '';
  private pendingQuoted = false;
  private quotedFieldLine = 0;
  /** A CR just ended a line; an LF right after it belongs to the same line end. */
  private afterCR = false;
  private afterCRInQuotes = false;
  private first = true;

  private readonly sep: number;

  /** `separator`: the cell separator, one character (a comma unless told). */
  constructor(
    private readonly file: string,
    separator = ',',
  ) {
    this.sep = separator.charCodeAt(0);
  }

  push(text: string): CsvRecord[] {
    const out: CsvRecord[] = [];
    const start = this.skipByteOrderMark(text);
    let fieldStart = start;
    const n = text.length;
    const sep = this.sep;
    for (let i = start; i < n; i++) {
      const c = text.charCodeAt(i);
      if (this.afterCR) {
        this.afterCR = false;
        if (c === LF) {
          fieldStart = i + 1;
          continue;
        }
      }
      switch (this.state) {
        case State.FieldStart:
          if (this.cells.length === 0 && this.pending === '') this.recordLine = this.line;
          if (c === QUOTE) {
            this.state = State.Quoted;
            this.pendingQuoted = true;
            this.quotedFieldLine = this.line;
            fieldStart = i + 1;
            break;
          }
          this.state = State.Unquoted;
          fieldStart = i;
        // falls through: the character starts an unquoted cell
        case State.Unquoted: {
          // Tight scan to the next special character: most cells are short unquoted numbers.
          let j = i;
          let d = c;
          while (d !== sep && d !== LF && d !== CR && d !== QUOTE && ++j < n) d = text.charCodeAt(j);
          if (j >= n) {
            i = n;
            break;
          }
          i = j;
          if (d === sep) {
            this.cells.push(this.pending + text.slice(fieldStart, i));
            this.pending = '';
            this.state = State.FieldStart;
          } else if (d === LF || d === CR) {
            this.cells.push(this.pending + text.slice(fieldStart, i));
            this.pending = '';
            this.endRecord(out);
            this.endLine(d);
          } else {
            throw new DataError(
              this.file,
              this.line,
              this.cells.length + 1,
              'a quote inside an unquoted cell (RFC 4180: wrap the cell in quotes and double the quote)',
            );
          }
          break;
        }
        case State.Quoted:
          if (c === QUOTE) {
            this.pending += text.slice(fieldStart, i);
            fieldStart = i + 1;
            this.state = State.QuoteInQuoted;
          } else if (c === LF) {
            if (!this.afterCRInQuotes) this.line++;
            this.afterCRInQuotes = false;
          } else if (c === CR) {
            this.line++;
            this.afterCRInQuotes = true;
          } else {
            this.afterCRInQuotes = false;
          }
          break;
        case State.QuoteInQuoted:
          if (c === QUOTE) {
            this.pending += '"';
            fieldStart = i + 1;
            this.state = State.Quoted;
          } else if (c === sep) {
            this.cells.push(this.pending);
            this.pending = '';
            this.pendingQuoted = false;
            this.state = State.FieldStart;
          } else if (c === LF || c === CR) {
            this.cells.push(this.pending);
            this.pending = '';
            this.endRecord(out);
            this.endLine(c);
          } else {
            throw new DataError(this.file, this.line, this.cells.length + 1, `unexpected ${JSON.stringify(text[i])} after the closing quote of a quoted cell`);
          }
          break;
      }
    }
    this.carryOpenCell(text, fieldStart);
    return out;
  }

  /** Index of the first character to read: 1 past a byte order mark at the very start of the file. */
  private skipByteOrderMark(text: string): number {
    if (!this.first || text.length === 0) return 0;
    this.first = false;
    return text.charCodeAt(0) === 0xfeff ? 1 : 0;
  }

  /** Keeps the part of a cell still open at the end of the chunk, for the next chunk to finish. */
  private carryOpenCell(text: string, fieldStart: number): void {
    if (this.state === State.Unquoted || this.state === State.Quoted) {
      this.pending += text.slice(fieldStart);
      if (this.pending.length > MAX_CELL_CHARS) {
        throw new DataError(
          this.file,
          this.recordLine,
          this.cells.length + 1,
          `cell longer than ${MAX_CELL_CHARS} characters (an unclosed quote, or not a CSV file?)`,
        );
      }
    }
  }

  /** Finishes the text; returns the last record when the file has no final newline. */
  end(): CsvRecord[] {
    const out: CsvRecord[] = [];
    switch (this.state) {
      case State.Quoted:
        throw new DataError(this.file, this.quotedFieldLine, this.cells.length + 1, 'a quoted cell is never closed (missing closing quote)');
      case State.QuoteInQuoted:
      case State.Unquoted:
        this.cells.push(this.pending);
        this.pending = '';
        this.endRecord(out);
        break;
      case State.FieldStart:
        // "a,b," at the very end: the trailing comma opens one more, empty, cell.
        if (this.cells.length > 0) {
          this.cells.push('');
          this.endRecord(out);
        }
        break;
    }
    return out;
  }

  private endLine(c: number): void {
    this.line++;
    this.afterCR = c === CR;
  }

  private endRecord(out: CsvRecord[]): void {
    const cells = this.cells;
    this.cells = [];
    this.state = State.FieldStart;
    const quoted = this.pendingQuoted;
    this.pendingQuoted = false;
    // A blank line is one empty, unquoted cell: skip it. `""` on its own line is a real record.
    if (cells.length === 1 && cells[0] === '' && !quoted) return;
    out.push({ cells, line: this.recordLine });
  }
}
