/** Parse JSON text and turn a syntax error into a DataError with line and column. */
import { DataError } from '../errors.js';

export function parseJsonText(text: string, file: string): unknown {
  try {
    return JSON.parse(text.charCodeAt(0) === 0xfeff ? text.slice(1) : text);
  } catch (error) {
    const message = error instanceof Error ? error.message : String(error);
    const at = /position (\d+)/.exec(message);
    const { line, column } = at ? lineAndColumn(text, Number(at[1])) : { line: 0, column: 0 };
    const detail = message.replace(/^JSON\.parse: /, '').replace(/ in JSON at position \d+.*$/, '');
    throw new DataError(file, line, column, `invalid JSON: ${detail}`);
  }
}

/** 1-based line and column of a character offset. */
export function lineAndColumn(text: string, offset: number): { line: number; column: number } {
  let line = 1;
  let lineStart = 0;
  for (let i = 0; i < offset && i < text.length; i++) {
    if (text.charCodeAt(i) === 10) {
      line++;
      lineStart = i + 1;
    }
  }
  return { line, column: offset - lineStart + 1 };
}
