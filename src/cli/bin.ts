// The `tendon` executable: everything lives in main.ts so tests can call it in-process.
import { runAsProgram } from './main.js';

void runAsProgram();
