"""Adaptive rounding of a 512 x 512 layer, 1024 samples, published defaults (10,000 iterations, batch 32): wall clock
and process CPU seconds of two implementations side by side, in alternating JVMs on the same machine.

Usage: python3 bench/adaptive/cpu_time.py BEFORE.jar AFTER.jar OUT.json [REPETITIONS] [ROWS] [ITERATIONS]
Each jar is a bench/target/benchmarks.jar (BEFORE built from the previous commit); each run is
`java -cp JAR dev.rungbook.bench.AdaptiveCurve ROWS ITERATIONS CURVE` (its loss curve is kept beside OUT.json as
adaptive-curve-{before,after}-N.txt for bench/adaptive/compare.py). The one-minute load average (/proc/loadavg)
before and after each run is recorded next to its wall clock: the machine is shared, so wall clock depends on what
else runs, process CPU much less. OUT.json is written atomically.
"""
import json
import os
import re
import subprocess
import sys
import tempfile


def load():
    with open("/proc/loadavg") as f:
        return float(f.read().split()[0])


def run(jar, rows, iterations, curve):
    before = load()
    out = subprocess.run(["java", "-cp", jar, "dev.rungbook.bench.AdaptiveCurve", str(rows), str(iterations), curve],
                         capture_output=True, text=True, check=True).stdout
    m = re.search(r"([0-9.]+) s wall, ([0-9.]+) s process CPU \((.*)\)", out)
    return {"wall_s": float(m.group(1)), "cpu_s": float(m.group(2)), "backend": m.group(3),
            "load_before": before, "load_after": load()}


def main():
    before_jar, after_jar, out = sys.argv[1], sys.argv[2], sys.argv[3]
    reps = int(sys.argv[4]) if len(sys.argv) > 4 else 2
    rows = int(sys.argv[5]) if len(sys.argv) > 5 else 512
    iterations = int(sys.argv[6]) if len(sys.argv) > 6 else 10_000
    here = os.path.dirname(os.path.abspath(out))
    rows_out = []
    for rep in range(reps):
        for label, jar in (("before", before_jar), ("after", after_jar)):
            curve = os.path.join(here, f"adaptive-curve-{label}-{rep + 1}.txt")
            r = run(jar, rows, iterations, curve)
            r.update({"what": f"adaptive rounding {rows}x512, 1024 samples, {iterations:,} iterations, {label}",
                      "implementation": label, "repetition": rep + 1})
            print(json.dumps(r), flush=True)
            rows_out.append(r)
    fd, tmp = tempfile.mkstemp(dir=here, suffix=".tmp")
    with os.fdopen(fd, "w") as f:
        json.dump(rows_out, f, indent=1)
        f.write("\n")
    os.replace(tmp, out)


if __name__ == "__main__":
    main()
