export { engineFallbackReason, ensureEngine, liveTensorCount, useEngine, type EngineName } from './backend.js';
export { DEFAULT_CHUNK_ROWS, EngineSession, type EngineGradients, type EngineTape, type EngineTrainForward, type SessionOptions } from './session.js';
