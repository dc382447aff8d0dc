"""numpy + OpenBLAS baseline for the tendon bench: the same dense shapes, float32, ReLU hidden
layers, per-call latency. Reads a JSON job on stdin, prints one JSON document on stdout:
{"numpy": version, "blas": name, "kernels": OpenBLAS core name or "unknown",
 "results": [{"widths", "batch", "rowsPerSec", "p50Ms", "p99Ms", "calls"}]}.
Weights are seeded random values: only the shapes matter for timing."""
import json
import math
import sys
import time

import numpy as np


def nearest_rank(sorted_values, q):
    rank = max(1, math.ceil(q * len(sorted_values)))
    return sorted_values[min(len(sorted_values), rank) - 1]


def blas_name():
    try:
        info = np.show_config(mode="dicts")
        return info["Build Dependencies"]["blas"]["name"]
    except Exception:  # older numpy has no dict mode
        return "unknown"


def blas_kernels():
    """The kernel set OpenBLAS chose at load time (e.g. SkylakeX = its AVX-512 kernels), from
    threadpoolctl when installed, else by asking the loaded library itself; "unknown" otherwise."""
    try:
        import threadpoolctl
        for lib in threadpoolctl.threadpool_info():
            if lib.get("internal_api") == "openblas":
                return lib.get("architecture") or "unknown"
    except Exception:
        pass
    try:
        import ctypes
        with open("/proc/self/maps") as maps:
            paths = {line.split()[-1] for line in maps if "openblas" in line.lower()}
        for path in paths:
            lib = ctypes.CDLL(path)
            for name in ("openblas_get_corename", "scipy_openblas_get_corename64_", "openblas_get_corename64_", "scipy_openblas_get_corename"):
                fn = getattr(lib, name, None)
                if fn is not None:
                    fn.restype = ctypes.c_char_p
                    return fn().decode()
    except Exception:
        pass
    return "unknown"


def main():
    job = json.load(sys.stdin)
    min_ms = job.get("minMs", 1000)
    rng = np.random.default_rng(1)
    results = []
    for case in job["cases"]:
        widths = case["widths"]
        weights = [(rng.standard_normal((a, b)).astype(np.float32) * np.float32(math.sqrt(2.0 / a)),
                    rng.standard_normal(b).astype(np.float32) * np.float32(0.1))
                   for a, b in zip(widths[:-1], widths[1:])]
        last = len(weights) - 1

        def forward(x):
            h = x
            for i, (w, b) in enumerate(weights):
                h = h @ w
                h += b
                if i < last:
                    np.maximum(h, 0, out=h)
            return h

        for batch in case["batches"]:
            x = rng.standard_normal((batch, widths[0])).astype(np.float32)
            for _ in range(2):
                forward(x)
            lat = []
            start = time.perf_counter()
            now = start
            while len(lat) < 3 or (now - start) * 1000 < min_ms:
                t0 = time.perf_counter()
                forward(x)
                now = time.perf_counter()
                lat.append((now - t0) * 1000)
            total = now - start
            lat.sort()
            results.append({"widths": widths, "batch": batch, "rowsPerSec": batch * len(lat) / total,
                            "p50Ms": nearest_rank(lat, 0.5), "p99Ms": nearest_rank(lat, 0.99), "calls": len(lat)})
    json.dump({"numpy": np.__version__, "blas": blas_name(), "kernels": blas_kernels(), "results": results}, sys.stdout)


if __name__ == "__main__":
    main()
