/**
 * The payload schema. formats/tendon.proto is its only copy: the build (tsup.config.ts) and the
 * test run (vitest.config.ts) load `.proto` imports as text, so the bundle carries the file's
 * exact contents and needs nothing at run time.
 */
import schemaText from '../../formats/tendon.proto';

/** formats/tendon.proto, as text. */
export const TENDON_SCHEMA: string = schemaText;

/** Fully qualified name of the payload message. */
export const PAYLOAD_MESSAGE = 'tendon.file.v1.TendonModel';

/** Fully qualified name of the message whose `kind` oneof holds one member per layer kind. */
export const LAYER_ENTRY_MESSAGE = 'tendon.file.v1.LayerEntry';
