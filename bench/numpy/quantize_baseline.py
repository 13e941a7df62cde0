"""NumPy baseline for QuantizeBench: per-channel asymmetric int8 quantize + dequantize + MSE/SQNR on a
4096 x 4096 float32 matrix, written the idiomatic vectorised way. Prints one JSON line with the median time.

Usage: python3 quantize_baseline.py [repeats]
"""
import json
import sys
import time

import numpy as np

N = 4096


def quantize(w):
    lo = np.minimum(w.min(axis=1, keepdims=True), 0.0)
    hi = np.maximum(w.max(axis=1, keepdims=True), 0.0)
    scale = (hi - lo) / 255.0
    scale = np.where(scale > 0, scale, 1.0).astype(np.float32)
    zp = np.round(-128.0 - lo / scale)
    codes = np.clip(np.round(w / scale) + zp, -128, 127).astype(np.int8)
    deq = (codes.astype(np.float32) - zp.astype(np.float32)) * scale
    err = w - deq
    mse = float(np.mean(err.astype(np.float64) ** 2))
    sqnr = 10 * np.log10(float(np.sum(w.astype(np.float64) ** 2)) / float(np.sum(err.astype(np.float64) ** 2)))
    return codes, deq, mse, sqnr


def main():
    repeats = int(sys.argv[1]) if len(sys.argv) > 1 else 7
    rng = np.random.default_rng(2)
    ranges = np.exp(rng.uniform(-3, 1, size=(N, 1)))
    w = (ranges * rng.standard_normal((N, N))).astype(np.float32)
    quantize(w)  # warm-up
    times = []
    cpu = []
    for _ in range(repeats):
        t = time.perf_counter()
        c = time.thread_time()
        quantize(w)
        cpu.append((time.thread_time() - c) * 1000)
        times.append((time.perf_counter() - t) * 1000)
    times.sort()
    cpu.sort()
    # thread_time: this thread's CPU time (NumPy's element-wise work here runs on the calling thread), which, unlike
    # the wall clock, does not count waiting for a core on a loaded machine.
    print(json.dumps({"benchmark": "numpy per-channel int8 quantize+dequantize+mse/sqnr 4096x4096",
                      "median_ms": times[len(times) // 2], "median_cpu_ms": cpu[len(cpu) // 2],
                      "numpy": np.__version__, "repeats": repeats}))


if __name__ == "__main__":
    main()
