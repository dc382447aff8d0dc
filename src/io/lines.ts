/**
 * Text lines of a file, read in pieces: a batch of complete lines per piece read.
 */
import { createReadStream } from 'node:fs';
import { asDataError } from './file-errors.js';

export interface TextLine {
  readonly text: string;
  /** 1-based. */
  readonly line: number;
}

const READ_PIECE_BYTES = 64 * 1024;

/**
 * Splits a UTF-8 file into lines (LF or CRLF), stripping a leading BOM. `counter.bytesRead`
 * follows the read.
 *
 * @example for await (const batch of readLineBatches('a.jsonl')) for (const l of batch) use(l.text);
 */
export async function* readLineBatches(path: string, counter: { bytesRead: number } = { bytesRead: 0 }): AsyncGenerator<TextLine[]> {
  const stream = createReadStream(path, { encoding: 'utf8', highWaterMark: READ_PIECE_BYTES });
  let carry = '';
  let line = 1;
  let first = true;
  try {
    for await (const piece of stream as AsyncIterable<string>) {
      counter.bytesRead = stream.bytesRead;
      // A piece with no line end only grows the carried line: no rescanning of long lines.
      if (piece.indexOf('\n') < 0) {
        carry += piece;
        continue;
      }
      let text = carry + piece;
      if (first && text.length > 0) {
        first = false;
        if (text.charCodeAt(0) === 0xfeff) text = text.slice(1);
      }
      const batch: TextLine[] = [];
      let from = 0;
      for (let at = text.indexOf('\n'); at >= 0; at = text.indexOf('\n', from)) {
        const end = at > from && text.charCodeAt(at - 1) === 13 ? at - 1 : at;
        batch.push({ text: text.slice(from, end), line: line++ });
        from = at + 1;
      }
      carry = text.slice(from);
      if (batch.length > 0) yield batch;
    }
    if (first && carry.charCodeAt(0) === 0xfeff) carry = carry.slice(1);
    if (carry.length > 0) yield [{ text: carry.endsWith('\r') ? carry.slice(0, -1) : carry, line }];
  } catch (error) {
    throw asDataError(path, error);
  } finally {
    stream.destroy();
  }
}
