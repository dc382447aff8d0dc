// Child process for the crash-safety test: saves two models over one target, alternately, until
// it is killed. Uses the built package (dist/), as a service would.
// usage: node save-loop.mjs TARGET A.tendon B.tendon
import { readModelFile, writeModelFile } from '../../../dist/index.js';

const [target, pathA, pathB] = process.argv.slice(2);
const docs = [(await readModelFile(pathA)).doc, (await readModelFile(pathB)).doc];
let saves = 0;
process.stdout.write('ready\n');
for (;;) {
  await writeModelFile(target, docs[saves % 2]);
  saves++;
  process.stdout.write(`saved ${saves}\n`);
}
