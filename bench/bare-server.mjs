// The baseline for the wire benchmark: the server a user would write by hand around the
// library's own model.run, with nothing of tendon serve: JSON.parse, a Float32Array,
// model.run, JSON.stringify. Usage: node bench/bare-server.mjs MODEL (prints its URL).
import { createServer } from 'node:http';
import { dirname, join } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';

const root = join(dirname(fileURLToPath(import.meta.url)), '..');
const { openModel } = await import(pathToFileURL(join(root, 'dist', 'index.js')).href);
const model = await openModel(process.argv[2]);

const server = createServer((req, res) => {
  const parts = [];
  req.on('data', (d) => parts.push(d));
  req.on('end', () => {
    try {
      const { rows } = JSON.parse(Buffer.concat(parts).toString('utf8'));
      const x = new Float32Array(rows.length * model.inputs);
      rows.forEach((row, r) => x.set(row, r * model.inputs));
      const outputs = model.run(x, rows.length);
      const body = JSON.stringify({
        outputs: Array.from({ length: rows.length }, (_, r) => Array.from(outputs.subarray(r * model.outputs, (r + 1) * model.outputs))),
      });
      res.writeHead(200, { 'content-type': 'application/json' });
      res.end(body);
    } catch (error) {
      res.writeHead(400, { 'content-type': 'application/json' });
      res.end(JSON.stringify({ error: String(error) }));
    }
  });
});
server.listen(0, '127.0.0.1', () => console.log(`bare server on http://127.0.0.1:${server.address().port}`));
process.on('SIGTERM', () => server.close(() => process.exit(0)));
