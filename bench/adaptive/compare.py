"""Compares two adaptive-rounding curves written by dev.rungbook.bench.AdaptiveCurve.

Usage: python3 bench/adaptive/compare.py REFERENCE.txt CANDIDATE.txt
Prints the median and 90th-percentile relative difference of the loss per iteration (iterations whose reference loss
is above 1e-9, so that the float noise of the first steps, where the soft weights equal the weights, is left out),
the largest difference of the undecided share, and both final weight MSEs.
"""
import sys


def load(path):
    loss, undecided, mse = [], [], None
    with open(path) as f:
        for line in f:
            p = line.split()
            if p[0] == "mse":
                mse = float(p[1])
            else:
                loss.append(float(p[0]))
                undecided.append(float(p[1]))
    return loss, undecided, mse


a, ua, ma = load(sys.argv[1])
b, ub, mb = load(sys.argv[2])
assert len(a) == len(b), "different numbers of iterations"
rel = sorted(abs(x - y) / abs(x) for x, y in zip(a, b) if abs(x) > 1e-9)
print(f"iterations {len(a)}; loss relative difference: median {rel[len(rel) // 2]:.3g}, "
      f"90th percentile {rel[int(len(rel) * 0.9)]:.3g}")
print(f"final loss {a[-1]:.6g} vs {b[-1]:.6g}; undecided share at the end {ua[-1]:.4f} vs {ub[-1]:.4f}, "
      f"largest difference over the run {max(abs(x - y) for x, y in zip(ua, ub)):.4f}")
print(f"weight MSE {ma:.6g} vs {mb:.6g} ({(mb - ma) / ma:+.2%})")
