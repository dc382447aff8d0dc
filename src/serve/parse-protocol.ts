/** Messages between the parse pool (parse-pool.ts) and its threads (parse-worker.ts). */
import type { BodyFormat } from './http-formats.js';
import type { ScoreShape } from './http-rows.js';

export interface ParseRequest {
  readonly id: number;
  readonly format: BodyFormat;
  readonly shape: ScoreShape;
  /** The body's bytes, transferred. */
  readonly body: ArrayBuffer;
}

export type ParseReply =
  | { readonly id: number; readonly ok: true; readonly rows: number; readonly x: ArrayBuffer }
  | { readonly id: number; readonly ok: false; readonly status: number; readonly message: string; readonly headers: Readonly<Record<string, string>> };
