/**
 * CRC-32 with the ISO-HDLC parameters (the zlib / PNG / Ethernet one): polynomial 0x04C11DB7
 * processed reflected (0xEDB88320), initial value 0xFFFFFFFF, final XOR 0xFFFFFFFF.
 * Table-driven, one byte per step: plenty for model files of a few megabytes.
 */

const REFLECTED_POLYNOMIAL = 0xedb88320;

/** CRC of every single-byte value, built once. */
const TABLE: Uint32Array = (() => {
  const table = new Uint32Array(256);
  for (let n = 0; n < 256; n++) {
    let c = n;
    for (let k = 0; k < 8; k++) c = c & 1 ? REFLECTED_POLYNOMIAL ^ (c >>> 1) : c >>> 1;
    table[n] = c >>> 0;
  }
  return table;
})();

/**
 * CRC-32 of `bytes` as an unsigned 32-bit number. Pass a previous result as `seed` to continue
 * over data that arrives in pieces.
 *
 * @example
 * crc32(new TextEncoder().encode('123456789')) // 0xcbf43926
 */
export function crc32(bytes: Uint8Array, seed = 0): number {
  let c = (seed ^ 0xffffffff) >>> 0;
  for (let i = 0; i < bytes.length; i++) c = TABLE[(c ^ bytes[i]) & 0xff] ^ (c >>> 8);
  return (c ^ 0xffffffff) >>> 0;
}

/**
 * A CRC-32 as 8 lowercase hex digits, the form used in reports and provenance.
 *
 * @example
 * crcHex(0xcbf43926) // 'cbf43926'
 */
export function crcHex(crc: number): string {
  return (crc >>> 0).toString(16).padStart(8, '0');
}
