/** Parse JSON text and turn a syntax error into a DataError with line and column. */
import { DataError } from '../errors.js';

export function parseJsonText(text: string, file: string): unknown {
  const body = text.charCodeAt(0) === 0xfeff ? text.slice(1) : text;
  try {
    return JSON.parse(body);
  } catch (error) {
    // JSON.parse does not always say where (V8 omits the position for some errors), so find
    // the first offending character with a small scanner of our own.
    const offset = firstSyntaxError(body);
    const { line, column } = lineAndColumn(body, offset);
    const found = offset < body.length ? `unexpected ${JSON.stringify(body[offset])}` : 'unexpected end of text';
    void error;
    throw new DataError(file, line, column, `invalid JSON: ${found}`);
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

/** Offset of the first character where `text` stops being valid JSON (text.length if it ends early). */
export function firstSyntaxError(text: string): number {
  let i = 0;
  const ws = () => {
    while (i < text.length && ' \t\n\r'.includes(text[i])) i++;
  };
  class Stop {
    constructor(readonly at: number) {}
  }
  const fail = (): never => {
    throw new Stop(i);
  };
  const expect = (ch: string) => (text[i] === ch ? i++ : fail());
  const value = (): void => {
    ws();
    const c = text[i];
    if (c === '{') {
      i++;
      ws();
      if (text[i] === '}') return void i++;
      for (;;) {
        ws();
        if (text[i] !== '"') fail();
        string();
        ws();
        expect(':');
        value();
        ws();
        if (text[i] === ',') i++;
        else return void expect('}');
      }
    }
    if (c === '[') {
      i++;
      ws();
      if (text[i] === ']') return void i++;
      for (;;) {
        value();
        ws();
        if (text[i] === ',') i++;
        else return void expect(']');
      }
    }
    if (c === '"') return string();
    for (const word of ['true', 'false', 'null']) {
      if (text.startsWith(word, i)) return void (i += word.length);
    }
    const m = /^-?(0|[1-9]\d*)(\.\d+)?([eE][-+]?\d+)?/.exec(text.slice(i, i + 400));
    if (m) return void (i += m[0].length);
    fail();
  };
  const string = () => {
    i++;
    while (i < text.length && text[i] !== '"') {
      if (text.charCodeAt(i) < 0x20) fail();
      i += text[i] === '\\' ? 2 : 1;
    }
    expect('"');
  };
  try {
    value();
    ws();
    return i < text.length ? i : text.length;
  } catch (stop) {
    if (stop instanceof Stop) return stop.at;
    throw stop;
  }
}
