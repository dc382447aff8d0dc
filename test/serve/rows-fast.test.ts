/**
 * The JSON number-array fast path against the general parser (JSON.parse, ECMA-404): the same
 * float32 for every number spelling, and null (so the general parser answers, with its own
 * message) for everything that is not plain number rows.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { parseRequestBody } from '../../src/serve/http-parse.js';
import { HttpProblem } from '../../src/serve/http-problem.js';
import { parseScoreBody } from '../../src/serve/http-rows.js';
import { parseNumberRows } from '../../src/serve/http-rows-fast.js';

const shape = { inputs: 3, features: ['a', 'b', 'c'], maxRows: 20 };
const bytes = (text: string) => Buffer.from(text, 'utf8');
const sameBits = (a: Float32Array, b: Float32Array) => a.length === b.length && a.every((v, i) => Object.is(v, b[i]));

describe('parseNumberRows', () => {
  it('gives bit for bit what JSON.parse + Math.fround give, for doubles of every magnitude and their shortest spelling (property)', () => {
    fc.assert(
      fc.property(
        fc.array(fc.array(fc.double({ noNaN: true, noDefaultInfinity: true, min: -3e38, max: 3e38 }), { minLength: 3, maxLength: 3 }), {
          minLength: 1,
          maxLength: 20,
        }),
        (rows) => {
          const text = JSON.stringify({ rows });
          const fast = parseNumberRows(bytes(text), 3, 20);
          const general = parseScoreBody(text, shape);
          expect(fast).not.toBeNull();
          expect(fast!.rows).toBe(general.rows);
          expect(sameBits(fast!.x, general.x)).toBe(true);
        },
      ),
      { numRuns: 300 },
    );
  });

  it('hand-picked spellings: exponents, long fractions, negative zero, whitespace of every kind', () => {
    const text =
      '\r\n{ "rows" :\t[ [ 0.1 , -0 , 1e-7 ] ,[1.5E+3,-2.5e-3,123456789012345678],\n[0.30000000000000004, 3.4028234663852886e38, 1.401298464324817e-45] ] }\n';
    const fast = parseNumberRows(bytes(text), 3, 20)!;
    expect(sameBits(fast.x, parseScoreBody(text, shape).x)).toBe(true);
    expect(Object.is(fast.x[1], -0)).toBe(true);
  });

  it.each([
    ['objects keyed by feature', '{"rows": [{"a": 1, "b": 2, "c": 3}]}'],
    ['a wrong width', '{"rows": [[1, 2]]}'],
    ['a number past float32', '{"rows": [[1e39, 1, 2]]}'],
    ['a leading zero (not JSON)', '{"rows": [[01, 1, 2]]}'],
    ['a trailing dot (not JSON)', '{"rows": [[1., 1, 2]]}'],
    ['a string', '{"rows": [["1", 1, 2]]}'],
    ['another key', '{"rows": [[1, 1, 2]], "id": 4}'],
    ['no rows', '{"rows": []}'],
    ['more rows than the limit', JSON.stringify({ rows: Array.from({ length: 21 }, () => [1, 2, 3]) })],
    ['trailing text', '{"rows": [[1, 1, 2]]} x'],
    ['a byte-order mark', '\ufeff{"rows": [[1, 1, 2]]}'],
  ])('%s: null, and the general parser gives the same message as before', (_, text) => {
    expect(parseNumberRows(bytes(text), 3, 20)).toBeNull();
    let general: unknown = null;
    let combined: unknown = null;
    try {
      parseScoreBody(text, shape);
    } catch (error) {
      general = error;
    }
    try {
      parseRequestBody('json', bytes(text), shape);
    } catch (error) {
      combined = error;
    }
    if (general === null) {
      expect(combined).toBeNull();
    } else {
      expect(combined).toBeInstanceOf(HttpProblem);
      expect((combined as HttpProblem).message).toBe((general as HttpProblem).message);
      expect((combined as HttpProblem).status).toBe((general as HttpProblem).status);
    }
  });
});
