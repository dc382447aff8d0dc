"""numpy doing the job `tendon score` does, for the bench's end-to-end row: load a float32 .npy,
run a dense stack in batches of 256 with float32 weights (ReLU on the hidden layers), save the
outputs as a float32 .npy. Usage: numpy_score.py JOB.json, where the job names the input, the
output and the layers: {"input": path, "output": path, "batch": 256,
"layers": [{"weight": path, "bias": path, "relu": true}, ...]}. The caller times the whole
process; this prints {"seconds": time from the first np.load to the end of np.save} on stdout."""
import json
import sys
import time

import numpy as np


def main():
    with open(sys.argv[1]) as f:
        job = json.load(f)
    start = time.perf_counter()
    layers = [(np.load(l["weight"]), np.load(l["bias"]), l["relu"]) for l in job["layers"]]
    x = np.load(job["input"])
    batch = job["batch"]
    out = np.empty((x.shape[0], layers[-1][0].shape[1]), dtype=np.float32)
    for at in range(0, x.shape[0], batch):
        h = x[at:at + batch]
        for w, b, relu in layers:
            h = h @ w
            h += b
            if relu:
                np.maximum(h, 0, out=h)
        out[at:at + batch] = h
    np.save(job["output"], out)
    json.dump({"seconds": time.perf_counter() - start}, sys.stdout)


if __name__ == "__main__":
    main()
