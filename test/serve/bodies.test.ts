/**
 * Score bodies besides JSON: NPY arrays written by NumPy (test/fixtures/serve/make-npy.py,
 * NumPy's own np.lib.format.write_array, NEP 1) and CSV, each answered as JSON, NPY or CSV as
 * Accept asks; every refusal with its status and message; bodies that lie about their length.
 * Statuses follow RFC 9110 (400, 413, 415).
 */
import { readFileSync, mkdtempSync, rmSync } from 'node:fs';
import { connect } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { BAKERY_FEATURES, BAKERY_LABELS, bakeryDoc } from '../fixtures/models.js';
import { writeModelFile } from '../../src/format/index.js';
import { decodeNpy } from '../../src/io/index.js';
import { formatFloat32 } from '../../src/io/numbers.js';
import { startServer, type RunningServer } from '../../src/serve/http.js';
import { openModel, type TendonModel } from '../../src/tendon.js';
import { call, parseExposition, postJson } from './helpers.js';

const FIXTURES = join(__dirname, '..', 'fixtures', 'serve');
const fixture = (name: string) => readFileSync(join(FIXTURES, name));
const MAX_ROWS = 50;
const dir = mkdtempSync(join(tmpdir(), 'tendon-bodies-'));
let running: RunningServer;
let model: TendonModel;

/** Row i of the fixtures, as make-npy.py computes it (in float64). */
const loaf = (i: number) => [214 + i, 231 - i, 219 + i / 2, 44 + i, 1.6 + i / 20, 790 + 10 * i, 56 - i];
const loaves = (n: number) => Array.from({ length: n }, (_, i) => loaf(i));

beforeAll(async () => {
  const path = join(dir, 'bakery.tendon');
  await writeModelFile(path, bakeryDoc(7));
  running = await startServer({ modelPath: path, port: 0, bodyLimitBytes: 64 * 1024, maxRowsPerRequest: MAX_ROWS, watch: false, log: () => undefined });
  model = await openModel(path);
});

afterAll(async () => {
  await running.close();
  model.dispose();
  rmSync(dir, { recursive: true, force: true });
});

const url = (p: string) => `${running.url}${p}`;
const post = (body: Uint8Array | string, type: string, accept?: string) =>
  fetch(url('/v1/score'), { method: 'POST', headers: { 'content-type': type, ...(accept ? { accept } : {}) }, body });
const expectedOutputs = (rows: number[][]) => model.run(rows);

describe('NPY bodies written by NumPy', () => {
  it('a float32 [5, 7] array is answered in JSON exactly as the same rows sent as JSON', async () => {
    const res = await post(fixture('loaves-f4.npy'), 'application/x-npy');
    expect(res.status).toBe(200);
    const answer = (await res.json()) as any;
    const json = await postJson(url('/v1/score'), { rows: loaves(5) });
    expect(answer).toEqual(json.json);
    expect(answer.outputs).toEqual(expectedOutputs(loaves(5)));
    expect(answer.topLabel).toHaveLength(5);
  });

  it('a float64 array answered as NPY: float32 [5, 3], equal to the JSON answers within 1e-6, the model named in a header', async () => {
    const res = await post(fixture('loaves-f8.npy'), 'application/x-npy', 'application/x-npy');
    expect(res.status).toBe(200);
    expect(res.headers.get('content-type')).toBe('application/x-npy');
    expect(res.headers.get('tendon-model')).toBe(model.checksum);
    const { data, shape } = decodeNpy('answer', Buffer.from(await res.arrayBuffer()));
    expect(shape).toEqual([5, 3]);
    expect(data).toBeInstanceOf(Float32Array);
    const json = (await postJson(url('/v1/score'), { rows: loaves(5) })).json.outputs as number[][];
    json.flat().forEach((v, i) => expect(Math.abs(data[i]! - v)).toBeLessThanOrEqual(1e-6));
  });

  it('format version 2.0 (u32 header length) is read too', async () => {
    const res = await post(fixture('loaves-f4-v2.npy'), 'application/x-npy');
    expect(res.status).toBe(200);
    expect(((await res.json()) as any).outputs).toEqual(expectedOutputs(loaves(3)));
  });
});

describe('CSV bodies', () => {
  it('a header in another order with an extra column is matched by feature name; the CSV answer has the labels as header', async () => {
    const order = [...BAKERY_FEATURES].reverse();
    const lines = [['note', ...order].join(','), ...loaves(4).map((row, i) => [`loaf ${i}`, ...order.map((f) => row[BAKERY_FEATURES.indexOf(f)])].join(','))];
    const res = await post(lines.join('\r\n'), 'text/csv; charset=utf-8', 'text/csv');
    expect(res.status).toBe(200);
    expect(res.headers.get('content-type')).toMatch(/^text\/csv/);
    const want = expectedOutputs(loaves(4)).map((row) => row.map(formatFloat32).join(','));
    expect(await res.text()).toBe([BAKERY_LABELS.join(','), ...want].join('\n') + '\n');
  });

  it('without a header the columns are the model inputs in order; answered in JSON by default', async () => {
    const res = await post(
      loaves(3)
        .map((r) => r.join(','))
        .join('\n') + '\n',
      'text/csv',
    );
    expect(res.status).toBe(200);
    expect(((await res.json()) as any).outputs).toEqual(expectedOutputs(loaves(3)));
  });
});

describe('Accept and the about route', () => {
  it('the highest q among our types wins; */* alone is JSON', async () => {
    const csv = await post(JSON.stringify({ rows: [loaf(0)] }), 'application/json', 'application/x-npy;q=0.2, text/csv;q=0.9');
    expect(csv.headers.get('content-type')).toMatch(/^text\/csv/);
    const any = await post(JSON.stringify({ rows: [loaf(0)] }), 'application/json', '*/*');
    expect(any.headers.get('content-type')).toMatch(/^application\/json/);
  });

  it('GET /v1/about lists the accepted body types', async () => {
    const about = await call(url('/v1/about'));
    expect(about.json.accepts).toEqual(['application/json', 'application/x-npy', 'text/csv']);
  });
});

/** An NPY 1.0 body with a hand-written header (to lie in it), padded as NumPy pads. */
function npyWith(dict: string, data: Uint8Array, headerLength?: number): Buffer {
  const unpadded = 10 + dict.length + 1;
  const total = Math.ceil(unpadded / 64) * 64;
  const head = Buffer.alloc(total, 0x20);
  Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]).copy(head);
  head.writeUInt16LE(headerLength ?? total - 10, 8);
  head.write(dict, 10, 'latin1');
  head[total - 1] = 0x0a;
  return Buffer.concat([head, data]);
}
const f4 = (values: number[]) => Buffer.from(new Float32Array(values).buffer);
const goodNpy = fixture('loaves-f4.npy');

const REFUSALS: [string, () => Promise<Response>, number, RegExp][] = [
  [
    'an unsupported Content-Type: 415 listing the accepted ones',
    () => post('<rows/>', 'application/xml'),
    415,
    /^Content-Type "application\/xml" is not accepted; send one of application\/json, application\/x-npy, text\/csv$/,
  ],
  [
    'NPY in Fortran order',
    () => post(fixture('loaves-fortran.npy'), 'application/x-npy'),
    400,
    /^NPY array is in Fortran \(column-major\) order; send C \(row-major\) order$/,
  ],
  ['NPY big-endian', () => post(fixture('loaves-big-endian.npy'), 'application/x-npy'), 400, /^NPY dtype '>f4' is big-endian; send float32/],
  [
    'NPY int32',
    () => post(fixture('loaves-i4.npy'), 'application/x-npy'),
    400,
    /^NPY dtype '<i4' is not accepted; send float32 \('<f4'\) or float64 \('<f8'\), little-endian$/,
  ],
  ['NPY 1-D', () => post(fixture('loaves-1d.npy'), 'application/x-npy'), 400, /^NPY shape \(7,\) is not 2-D; send \[rows, 7\]$/],
  [
    'NPY of the wrong width',
    () => post(fixture('loaves-width-5.npy'), 'application/x-npy'),
    400,
    /^NPY shape \(2, 5\): the model takes 7 inputs per row, not 5$/,
  ],
  [
    'NPY data shorter than the header declares',
    () => post(goodNpy.subarray(0, goodNpy.length - 4), 'application/x-npy'),
    400,
    /^NPY header declares \(5, 7\) of '<f4', 140 data bytes, but the body carries 136$/,
  ],
  [
    'NPY data longer than the header declares',
    () => post(Buffer.concat([goodNpy, f4([1])]), 'application/x-npy'),
    400,
    /^NPY header declares \(5, 7\) of '<f4', 140 data bytes, but the body carries 144$/,
  ],
  [
    'an NPY header length past the body',
    () => post(npyWith("{'descr': '<f4', 'fortran_order': False, 'shape': (1, 7), }", f4(loaf(0)), 60000), 'application/x-npy'),
    400,
    /^NPY header says it is 60000 bytes long, but the body ends \d+ bytes after its start$/,
  ],
  [
    'an NPY shape past the row limit (nothing allocated for it)',
    () => post(npyWith("{'descr': '<f4', 'fortran_order': False, 'shape': (100000000, 7), }", f4(loaf(0))), 'application/x-npy'),
    413,
    /^NPY shape \(100000000, 7\): 100000000 rows pass the limit of 50 per request$/,
  ],
  [
    'NPY with 0 rows',
    () => post(npyWith("{'descr': '<f4', 'fortran_order': False, 'shape': (0, 7), }", new Uint8Array(0)), 'application/x-npy'),
    400,
    /^NPY shape has 0 rows; send at least one row$/,
  ],
  [
    'a body that is not NPY',
    () => post('{"rows": [[1]]}', 'application/x-npy'),
    400,
    /^body: not an NPY file \(it does not start with the magic bytes \\x93NUMPY\)$/,
  ],
  [
    'an NPY header that is not a dict',
    () => post(npyWith('nonsense', new Uint8Array(0)), 'application/x-npy'),
    400,
    /^body: NPY header expected "\{" at offset 0/,
  ],
  [
    'NaN in NPY',
    () => post(npyWith("{'descr': '<f4', 'fortran_order': False, 'shape': (1, 7), }", f4([NaN, 1, 2, 3, 4, 5, 6])), 'application/x-npy'),
    400,
    /^rows\[0\]\[0\] \(zone1_temp_c\): NaN is not a finite float32 number$/,
  ],
  [
    'a float64 past float32 in NPY',
    () =>
      post(
        npyWith("{'descr': '<f8', 'fortran_order': False, 'shape': (1, 7), }", Buffer.from(new Float64Array([1, 1e39, 2, 3, 4, 5, 6]).buffer)),
        'application/x-npy',
      ),
    400,
    /^rows\[0\]\[1\] \(zone2_temp_c\): 1e\+39 is not a finite float32 number$/,
  ],
  [
    'CSV missing a feature column',
    () => post('zone1_temp_c,zone2_temp_c\n1,2\n', 'text/csv'),
    400,
    /^body:1: missing feature columns "zone3_temp_c", .* \(the header has: "zone1_temp_c", "zone2_temp_c"\)$/,
  ],
  [
    'a CSV cell that is not a number',
    () => post(`${BAKERY_FEATURES.join(',')}\nhot,1,2,3,4,5,6\n`, 'text/csv'),
    400,
    /^body:2:1: cell "hot" in column "zone1_temp_c" is not a number$/,
  ],
  ['a ragged CSV row', () => post('1,2,3,4,5,6,7\n1,2,3\n', 'text/csv'), 400, /^body:2: row has 3 cells, expected 7 \(the first row has 7\)$/],
  ['CSV of the wrong width without a header', () => post('1,2,3\n', 'text/csv'), 400, /^body:1: has 3 columns, but the model takes 7 inputs/],
  [
    'CSV past the row limit',
    () => post(Array.from({ length: MAX_ROWS + 1 }, () => loaf(0).join(',')).join('\n'), 'text/csv'),
    413,
    /^body: 51 rows pass the limit of 50 per request$/,
  ],
  ['an empty CSV body', () => post('', 'text/csv'), 400, /^body: empty; send at least one CSV row$/],
];

describe('refusals: each with its status and a message naming what is wrong', () => {
  it.each(REFUSALS)('%s', async (_, send, status, message) => {
    const res = await send();
    expect(res.status).toBe(status);
    const body = (await res.json()) as any;
    expect(body.error.status).toBe(status);
    expect(body.error.message).toMatch(message);
    if (status === 415) expect(res.headers.get('accept-post')).toBe('application/json, application/x-npy, text/csv');
  });

  it('the endpoint still answers after every refusal', async () => {
    expect((await postJson(url('/v1/score'), { rows: [loaf(1)] })).json.outputs).toEqual(expectedOutputs([loaf(1)]));
  });
});

/** Raw bytes over one socket; resolves with everything the server sent back until it closed or went quiet. */
function rawExchange(write: (s: ReturnType<typeof connect>) => void, quietMs = 1500): Promise<string> {
  return new Promise((resolve) => {
    const s = connect(running.port, '127.0.0.1', () => write(s));
    let text = '';
    let timer = setTimeout(() => s.destroy(), quietMs);
    s.on('data', (d) => {
      text += d.toString('latin1');
      clearTimeout(timer);
      timer = setTimeout(() => s.destroy(), 300);
    });
    s.on('error', () => undefined);
    s.on('close', () => {
      clearTimeout(timer);
      resolve(text);
    });
  });
}
const head = (length: number) => `POST /v1/score HTTP/1.1\r\nhost: x\r\ncontent-type: application/x-npy\r\ncontent-length: ${length}\r\n\r\n`;

describe('bodies that lie about their length, beside a well-behaved client', () => {
  it('a truncated NPY body and a Content-Length shorter than the body end in 400; a concurrent client gets every answer right', async () => {
    const before = parseExposition((await call(url('/v1/counters'))).text).samples;
    const count400 = (samples: typeof before) =>
      samples.find((s) => s.name === 'tendon_requests_total' && s.labels.route === '/v1/score' && s.labels.status === '400')?.value ?? 0;
    const good = (async () => {
      const failures: string[] = [];
      for (let i = 0; i < 20; i++) {
        const res = await post(fixture('loaves-f4.npy'), 'application/x-npy');
        const answer = (await res.json()) as any;
        if (res.status !== 200 || JSON.stringify(answer.outputs) !== JSON.stringify(expectedOutputs(loaves(5)))) failures.push(`${res.status}`);
      }
      return failures;
    })();
    // The client says 268 bytes, sends 100 and closes its side.
    const truncated = rawExchange((s) => {
      s.write(head(goodNpy.length));
      s.end(goodNpy.subarray(0, 100));
    });
    // The client says 200 bytes and sends all 268: the handler refuses the first 200 (NPY data
    // length); the 68 left over are not a request, and Node answers them 400 on its own, which
    // may reach the socket first.
    const lying = rawExchange((s) => s.end(Buffer.concat([Buffer.from(head(200)), goodNpy])));
    const [failures, truncatedText, lyingText] = await Promise.all([good, truncated, lying]);
    expect(failures).toEqual([]);
    expect(lyingText).toMatch(/^HTTP\/1\.1 400 /);
    if (lyingText.includes('application/json')) expect(lyingText).toContain("NPY header declares (5, 7) of '<f4', 140 data bytes, but the body carries 72");
    // The truncated request is refused 400 whether or not the closed socket can still read it.
    if (truncatedText) expect(truncatedText).toMatch(/^HTTP\/1\.1 400 /);
    const after = parseExposition((await call(url('/v1/counters'))).text).samples;
    expect(count400(after) - count400(before)).toBeGreaterThanOrEqual(2);
  });
});
