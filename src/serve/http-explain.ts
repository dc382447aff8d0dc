/**
 * The explain route: per-feature attributions (integrated gradients on the float64 reference
 * path) for rows in the score body's shapes. Options travel in the query string, so any body
 * the score route reads works here too: `POST /v1/explain?class=top&steps=64&baseline=mean`.
 *
 * The work runs on the main thread in float64 (steps x rows gradient passes), so a request
 * carries at most `maxRows` rows (default 100) and at most 1024 steps.
 */
import type { IncomingMessage } from 'node:http';
import { TendonError } from '../errors.js';
import { ATTRIBUTION_CAUTION, AUTO_STEPS_LIMIT, DEFAULT_STEPS, checkSteps, explainRows, namedBaseline, parseClassChoice } from '../explain/index.js';
import type { TendonModel } from '../tendon.js';
import { readBody } from './http-body.js';
import { HttpProblem } from './http-problem.js';
import { parseScoreBody } from './http-rows.js';

/** Most rows one explain request may carry by default. */
export const EXPLAIN_MAX_ROWS = 100;

/**
 * Read, check and answer one explain request for `model`.
 * @throws HttpProblem 400 for a bad body or option, 413 for too many rows or bytes.
 */
export async function explainRequest(
  req: IncomingMessage,
  model: TendonModel,
  limits: { bodyLimitBytes: number; maxRows: number },
): Promise<{ body: unknown; rows: number }> {
  const query = new URL(req.url ?? '/', 'http://endpoint.invalid').searchParams;
  const text = (await readBody(req, limits.bodyLimitBytes)).toString('utf8');
  const { rows, x } = parseScoreBody(text, { inputs: model.inputs, features: model.features, maxRows: limits.maxRows });
  const doc = model.doc;
  const options = asBadRequest(() => {
    const stepsText = query.get('steps');
    const steps = stepsText === null ? DEFAULT_STEPS : checkSteps(Number(stepsText), 'steps');
    if (steps > AUTO_STEPS_LIMIT) throw new HttpProblem(400, `steps: at most ${AUTO_STEPS_LIMIT} on the endpoint, got ${steps} (the command line takes more)`);
    const baselineName = query.get('baseline') ?? 'mean';
    if (baselineName !== 'mean' && baselineName !== 'zeros') throw new HttpProblem(400, `baseline: expected mean or zeros, got "${baselineName.slice(0, 40)}"`);
    return { output: parseClassChoice(doc, query.get('class') ?? 'top', 'class'), steps, baseline: namedBaseline(doc, baselineName, 'baseline') };
  });
  const e = explainRows(doc, x, rows, options);
  const names = doc.features ?? Array.from({ length: doc.inputs }, (_, i) => `x${i}`);
  const attributions = Array.from({ length: rows }, (_, r) => Object.fromEntries(names.map((name, c) => [name, e.attributions[r * doc.inputs + c]])));
  const body: Record<string, unknown> = {
    model: model.checksum,
    class: Array.from(e.classes),
    attributions,
    score: Array.from(e.score),
    baselineScore: Array.from(e.baselineScore),
    gap: Array.from(e.gaps),
    steps: Array.from(e.steps),
    caution: ATTRIBUTION_CAUTION,
  };
  if (doc.labels) body.label = Array.from(e.classes, (k) => doc.labels![k]);
  return { body, rows };
}

/** A typed refusal from the explain options becomes a 400 with its one-line message. */
function asBadRequest<T>(fn: () => T): T {
  try {
    return fn();
  } catch (error) {
    if (error instanceof TendonError) throw new HttpProblem(400, error.message);
    throw error;
  }
}
