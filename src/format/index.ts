/** bytes <-> model document: header, checksum, protobuf payload, validation, f16 / i8 codecs. */
export { crc32, crcHex } from './crc32.js';
export { float16Bits, float16Value, toFloat16, fromFloat16, FLOAT16_MAX } from './float16.js';
export { quantiseColumns, dequantiseColumns, type Int8Matrix } from './int8.js';
export { MAGIC, HEADER_BYTES, FORMAT_VERSION, frame, parseHeader, openFrame, type FormatVersion, type FileHeader } from './header.js';
export { TENDON_SCHEMA, PAYLOAD_MESSAGE } from './schema.js';
export { DTYPE_CODES, DTYPE_BYTES, payloadSchema } from './payload.js';
export { encodeModel, decodeModel, toPayload, type DecodedModel } from './codec.js';
export { checkPayload } from './check.js';
export { readModelFile, writeModelFile, writeBytesAtomic, checksumOf, type ReadModel, type AtomicWriteSteps } from './file.js';
