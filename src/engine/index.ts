export { engineFallbackReason, ensureEngine, liveTensorCount, useEngine, type EngineName } from './backend.js';
export { DEFAULT_CHUNK_ROWS, EngineSession, type EngineGradients, type EngineTape, type EngineTrainForward, type SessionOptions } from './session.js';
export { ENGINE_CHOICES, resolveEngine, type EngineChoice, type ResolvedEngine, type RuntimeEngine } from './choice.js';
export { FastSession, type FastSessionOptions } from './fast/fast-session.js';
export { FastTrainSession } from './fast/fast-train.js';
export { wasmSimdAvailable } from './fast/dense-kernel.js';
