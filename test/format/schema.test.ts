import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import protobuf from 'protobufjs';
import { describe, expect, it } from 'vitest';
import { DTYPE_CODES } from '../../src/format/payload.js';
import { activationKind } from '../../src/model/index.js';
import { PAYLOAD_MESSAGE, TENDON_SCHEMA } from '../../src/format/schema.js';
import { ACTIVATIONS, STORAGE_CODECS } from '../../src/model/types.js';

const protoPath = fileURLToPath(new URL('../../formats/tendon.proto', import.meta.url));

describe('embedded schema', () => {
  it('the schema the runtime parses is formats/tendon.proto, byte for byte (the build embeds the file)', () => {
    expect(TENDON_SCHEMA).toBe(readFileSync(protoPath, 'utf8'));
  });

  it('parses as proto3 and names the payload message', () => {
    const root = protobuf.parse(TENDON_SCHEMA, { keepCase: true }).root;
    expect(root.lookupType(PAYLOAD_MESSAGE).fieldsArray.map((f) => f.name)).toContain('layers');
  });

  it('activation codes match the schema enum, for every activation the model knows', () => {
    const root = protobuf.parse(TENDON_SCHEMA, { keepCase: true }).root;
    const values = root.lookupEnum('tendon.file.v1.Activation').values;
    for (const name of ACTIVATIONS) expect(values[`ACTIVATION_${name.toUpperCase()}`]).toBe(activationKind(name).code);
    expect(Object.keys(values)).toHaveLength(ACTIVATIONS.length + 1);
  });

  it('dtype codes match the schema enum, for every storage codec', () => {
    const root = protobuf.parse(TENDON_SCHEMA, { keepCase: true }).root;
    const values = root.lookupEnum('tendon.file.v1.DType').values;
    for (const codec of STORAGE_CODECS) expect(values[`DTYPE_${codec.toUpperCase()}`]).toBe(DTYPE_CODES[codec]);
  });
});
