import { crc32 as zlibCrc32 } from 'node:zlib';
import { describe, expect, it } from 'vitest';
import { crc32, crcHex } from '../../src/format/crc32.js';
import { seededRandom } from '../fixtures/models.js';

const ascii = (s: string) => new TextEncoder().encode(s);

describe('crc32', () => {
  it('check value of "123456789" is 0xCBF43926 (CRC RevEng catalogue, CRC-32/ISO-HDLC)', () => {
    expect(crc32(ascii('123456789'))).toBe(0xcbf43926);
  });

  it('of the empty string is 0 (CRC RevEng catalogue parameters: init = xorout = 0xFFFFFFFF)', () => {
    expect(crc32(new Uint8Array(0))).toBe(0);
  });

  it('of "The quick brown fox jumps over the lazy dog" is 0x414FA339 (from memory, zlib)', () => {
    expect(crc32(ascii('The quick brown fox jumps over the lazy dog'))).toBe(0x414fa339);
  });

  it('agrees with node:zlib crc32 on seeded random buffers (independent implementation)', () => {
    const random = seededRandom(99);
    for (const length of [1, 2, 3, 7, 64, 1000, 4097]) {
      const bytes = Uint8Array.from({ length }, () => Math.floor(random() * 256));
      expect(crc32(bytes)).toBe(zlibCrc32(bytes));
    }
  });

  it('continues over data split in pieces (seed = previous CRC, zlib convention)', () => {
    const a = ascii('12345');
    const b = ascii('6789');
    expect(crc32(b, crc32(a))).toBe(0xcbf43926);
  });

  it('formats as 8 lowercase hex digits', () => {
    expect(crcHex(0xcbf43926)).toBe('cbf43926');
    expect(crcHex(0x1a)).toBe('0000001a');
  });
});
