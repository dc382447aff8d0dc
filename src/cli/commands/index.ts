/** Every command, in the order `tendon help` lists them. */
import type { Command } from '../command.js';
import { bench } from './bench.js';
import { check } from './check.js';
import { fold } from './fold.js';
import { serve } from './serve.js';
import { shrink } from './shrink.js';
import { demo } from './demo.js';
import { pack } from './pack.js';
import { score } from './score.js';
import { about } from './about.js';
import { tune } from './tune.js';

export const commands: readonly Command[] = [demo, pack, about, score, check, tune, bench, shrink, fold, serve];
