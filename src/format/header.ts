/**
 * The fixed 16-byte header in front of every model file, little-endian:
 *
 *   offset 0  4 bytes  magic "TNDN" (0x54 0x4E 0x44 0x4E)
 *   offset 4  u16      format major version
 *   offset 6  u16      format minor version
 *   offset 8  u32      payload length in bytes
 *   offset 12 u32      CRC-32 (ISO-HDLC) of the payload
 */
import type { Problem } from '../errors.js';
import { crc32, crcHex } from './crc32.js';

export const MAGIC = Uint8Array.of(0x54, 0x4e, 0x44, 0x4e);
export const HEADER_BYTES = 16;

export interface FormatVersion {
  readonly major: number;
  readonly minor: number;
}

/**
 * The newest version this code writes; a file is written with the lowest version that holds it
 * (codec.ts `versionFor`): 1.0, 1.1 with a calibration temperature, 1.2 with int8 activation
 * ranges, 2.0 with a regression target scaling (a field a 1.x reader would skip and then answer
 * in scaled units). It reads any 1.x and 2.x.
 */
export const FORMAT_VERSION: FormatVersion = { major: 2, minor: 0 };

/** The oldest major version this code reads. */
export const OLDEST_MAJOR = 1;

export interface FileHeader {
  readonly version: FormatVersion;
  readonly payloadLength: number;
  readonly crc: number;
}

/**
 * Put a header in front of a payload.
 *
 * @example
 * const file = frame(payload); // file.length === 16 + payload.length
 */
export function frame(payload: Uint8Array, version: FormatVersion = FORMAT_VERSION): Uint8Array {
  const out = new Uint8Array(HEADER_BYTES + payload.length);
  out.set(MAGIC, 0);
  const view = new DataView(out.buffer);
  view.setUint16(4, version.major, true);
  view.setUint16(6, version.minor, true);
  view.setUint32(8, payload.length, true);
  view.setUint32(12, crc32(payload), true);
  out.set(payload, HEADER_BYTES);
  return out;
}

/** Read the header fields without judging them. `bytes` must hold at least 16 bytes. */
export function parseHeader(bytes: Uint8Array): FileHeader {
  const view = new DataView(bytes.buffer, bytes.byteOffset, HEADER_BYTES);
  return {
    version: { major: view.getUint16(4, true), minor: view.getUint16(6, true) },
    payloadLength: view.getUint32(8, true),
    crc: view.getUint32(12, true),
  };
}

function hexBytes(bytes: Uint8Array): string {
  return Array.from(bytes, (b) => b.toString(16).padStart(2, '0')).join(' ');
}

/**
 * Check the header and the payload's integrity. Each check needs the previous one to hold
 * (a wrong magic makes every other field meaningless), so the first failure ends the list.
 * On success returns the header and the payload view.
 */
export function openFrame(bytes: Uint8Array): { header: FileHeader; payload: Uint8Array } | Problem {
  if (bytes.length < HEADER_BYTES) {
    return { where: 'header', message: `file is ${bytes.length} bytes, shorter than the ${HEADER_BYTES}-byte header` };
  }
  const magic = bytes.subarray(0, 4);
  if (!magic.every((b, i) => b === MAGIC[i])) {
    return {
      where: 'header',
      message: `magic bytes are ${hexBytes(magic)}, expected ${hexBytes(MAGIC)} ("TNDN"): not a tendon model file`,
    };
  }
  const header = parseHeader(bytes);
  const { major, minor } = header.version;
  const mine = `${FORMAT_VERSION.major}.${FORMAT_VERSION.minor}`;
  if (major > FORMAT_VERSION.major) {
    return {
      where: 'header',
      message: `file format version ${major}.${minor} is newer than this reader's ${mine}; open it with a newer tendon`,
    };
  }
  if (major < OLDEST_MAJOR) {
    return { where: 'header', message: `file format version ${major}.${minor} is older than any this reader (${OLDEST_MAJOR}.0 to ${mine}) supports` };
  }
  const actual = bytes.length - HEADER_BYTES;
  if (header.payloadLength !== actual) {
    const message =
      actual < header.payloadLength
        ? `payload is truncated: the header declares ${header.payloadLength} bytes, the file holds ${actual}`
        : `file has ${actual - header.payloadLength} extra bytes after the ${header.payloadLength}-byte payload the header declares`;
    return { where: 'header', message };
  }
  const payload = bytes.subarray(HEADER_BYTES);
  const crc = crc32(payload);
  if (crc !== header.crc) {
    return {
      where: 'payload',
      message: `CRC-32 mismatch: header expects ${crcHex(header.crc)}, payload computes to ${crcHex(crc)}; the file is corrupt`,
    };
  }
  return { header, payload };
}
