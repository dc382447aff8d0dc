/**
 * Little-endian typed-array <-> byte conversions. The file is little-endian whatever the host;
 * on a little-endian host (every platform Node ships for today) a copy is enough, elsewhere
 * a DataView swaps. Input byte views may sit at any offset, so reads always copy first.
 */

const HOST_IS_LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

/** The bytes of float32 values, little-endian. */
export function float32ToBytes(values: Float32Array): Uint8Array {
  if (HOST_IS_LITTLE_ENDIAN) return new Uint8Array(values.buffer.slice(values.byteOffset, values.byteOffset + values.byteLength));
  const out = new Uint8Array(values.length * 4);
  const view = new DataView(out.buffer);
  for (let i = 0; i < values.length; i++) view.setFloat32(i * 4, values[i], true);
  return out;
}

/** The bytes of uint16 values, little-endian. */
export function uint16ToBytes(values: Uint16Array): Uint8Array {
  if (HOST_IS_LITTLE_ENDIAN) return new Uint8Array(values.buffer.slice(values.byteOffset, values.byteOffset + values.byteLength));
  const out = new Uint8Array(values.length * 2);
  const view = new DataView(out.buffer);
  for (let i = 0; i < values.length; i++) view.setUint16(i * 2, values[i], true);
  return out;
}

/** float32 values from little-endian bytes; `bytes.length` must be a multiple of 4. */
export function bytesToFloat32(bytes: Uint8Array): Float32Array {
  const count = bytes.length >>> 2;
  if (HOST_IS_LITTLE_ENDIAN) return new Float32Array(new Uint8Array(bytes).buffer, 0, count);
  const out = new Float32Array(count);
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  for (let i = 0; i < count; i++) out[i] = view.getFloat32(i * 4, true);
  return out;
}

/** uint16 values from little-endian bytes; `bytes.length` must be even. */
export function bytesToUint16(bytes: Uint8Array): Uint16Array {
  const count = bytes.length >>> 1;
  if (HOST_IS_LITTLE_ENDIAN) return new Uint16Array(new Uint8Array(bytes).buffer, 0, count);
  const out = new Uint16Array(count);
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  for (let i = 0; i < count; i++) out[i] = view.getUint16(i * 2, true);
  return out;
}
