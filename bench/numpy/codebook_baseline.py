"""NumPy baseline for the codebook target: 16 levels fitted to 2^24 seeded N(0,1) float32 values by a sort-based
Lloyd loop (sort once, then each step finds the cells' boundaries with searchsorted on the sorted values and takes
the cells' means from a prefix sum), written the idiomatic vectorised way. Prints one JSON line with the median
time, so that the library's figure can be held against the same machine's NumPy in one session.

Usage: python3 codebook_baseline.py [repeats]
"""
import json
import sys
import time

import numpy as np

N = 1 << 24
K = 16


def lloyd(x, k=K, tol=1e-7, max_steps=10000):
    s = np.sort(x).astype(np.float64)  # float64 once: searchsorted would otherwise convert the array every step
    prefix = np.concatenate(([0.0], np.cumsum(s)))
    # start from the quantiles of the data
    idx = (np.arange(k + 1) * (len(s) / k)).astype(np.int64)
    levels = (prefix[idx[1:]] - prefix[idx[:-1]]) / np.maximum(idx[1:] - idx[:-1], 1)
    steps = 0
    for steps in range(1, max_steps + 1):
        thresholds = (levels[1:] + levels[:-1]) / 2
        cut = np.concatenate(([0], np.searchsorted(s, thresholds, side="right"), [len(s)]))
        counts = np.diff(cut)
        sums = prefix[cut[1:]] - prefix[cut[:-1]]
        new = np.where(counts > 0, sums / np.maximum(counts, 1), levels)
        moved = float(np.max(np.abs(new - levels)))
        levels = new
        if moved < tol:
            break
    return levels, steps


def main():
    repeats = int(sys.argv[1]) if len(sys.argv) > 1 else 5
    rng = np.random.default_rng(2)
    x = rng.standard_normal(N).astype(np.float32)
    wall = []
    cpu = []
    steps = 0
    for _ in range(repeats):
        t0 = time.perf_counter()
        c0 = time.process_time()
        _, steps = lloyd(x)
        cpu.append((time.process_time() - c0) * 1e3)
        wall.append((time.perf_counter() - t0) * 1e3)
    print(json.dumps({"benchmark": "numpy sort-based Lloyd loop, k=16 on 2^24 N(0,1) float32 values",
                      "median_ms": float(np.median(wall)), "median_cpu_ms": float(np.median(cpu)),
                      "steps": steps, "numpy": np.__version__, "repeats": repeats}))


if __name__ == "__main__":
    main()
