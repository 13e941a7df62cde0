"""Turns the JMH JSON results in bench/results into SUMMARY.md: times and the ratios the issues ask about."""
import json
import statistics
import os
import platform
import sys
from datetime import date

out = sys.argv[1]


def load(name):
    path = os.path.join(out, name)
    if not os.path.exists(path):
        return {}
    with open(path) as f:
        rows = json.load(f)
    return {r["benchmark"].rsplit(".", 1)[1]: r for r in rows}


def ms(row):
    m = row["primaryMetric"]
    unit = m["scoreUnit"]
    v = m["score"]
    return v if unit.startswith("ms") else v / 1e6 if unit.startswith("ns") else v * 1000 if unit.startswith("s/") else v


lines = [f"# Benchmark summary ({date.today().isoformat()}, {os.cpu_count()} cores, {platform.machine()})", ""]
lines.append("Each table comes from one JMH run in which the benchmarks ran side by side; times are JMH scores (mean).")
lines.append("")

read = load("CheckpointReadBench.json")
if read:
    base = ms(read["plainFileChannelRead"])
    ours = ms(read["checkpointLoadAll"])
    lines += ["## Reading a 1 GiB float32 safetensors file (warm page cache)", "",
              "| benchmark | ms | GiB/s |", "| --- | ---: | ---: |",
              f"| plain FileChannel read | {base:.1f} | {1024 / base:.2f} |",
              f"| Checkpoint.open + every tensor as float32 | {ours:.1f} | {1024 / ours:.2f} |", "",
              f"Rungbook reads at **{base / ours:.0%}** of the plain read's speed (target: at least 80%).", ""]

bf = load("Bf16DecodeBench.json")
if bf:
    dec = ms(bf["decodeBf16"])
    cp = ms(bf["bulkCopyBaseline"])
    n = 268435456
    lines += ["## BF16 to float32, 256M values", "", "| benchmark | ms | G values/s |", "| --- | ---: | ---: |",
              f"| bulk copy of the bytes (no conversion) | {cp:.1f} | {n / cp / 1e6:.2f} |",
              f"| library BF16 decoder | {dec:.1f} | {n / dec / 1e6:.2f} |", "",
              f"Conversion runs at **{n / dec / 1e6:.2f} G values/s** (target: at least 1), "
              f"{dec / cp:.2f}x the time of the plain copy.", ""]

LABELS = [("plainCopy", "plain copy of the matrix"),
          ("fusedPerChannelInt8", "fused kernel: per-channel asym int8 + dequantize + MSE/SQNR"),
          ("apiPerChannelInt8", "API: same spec, apply + error().sqnrDb()"),
          ("apiPerChannelInt8AllMetrics", "API: same spec, every metric incl. KL of histograms"),
          ("apiPerGroupInt4", "API: int4 per-group 128"),
          ("apiNf4", "API: NF4 block 64"),
          ("apiCodebook16On2To24", "API: codebook k=16 on 2^24 values")]

npr = None
npf = os.path.join(out, "numpy-quantize.json")
if os.path.exists(npf):
    with open(npf) as f:
        npr = json.load(f)


def quantize_section(title, note, q, qv, before, np_ms, np_what):
    copy = ms(q["plainCopy"])
    cols = "| benchmark | ms | x plain copy |"
    sep = "| --- | ---: | ---: |"
    if qv:
        cols += " ms, Vector API module | x plain copy |"
        sep += " ---: | ---: |"
    if before:
        cols += " ms, previous implementation | speed-up |"
        sep += " ---: | ---: |"
    res = [title, "", note, "", cols, sep]
    for k, label in LABELS:
        if k not in q:
            continue
        row = f"| {label} | {ms(q[k]):.1f} | {ms(q[k]) / copy:.1f} |"
        if qv:
            vc = ms(qv["plainCopy"])
            row += f" {ms(qv[k]):.1f} | {ms(qv[k]) / vc:.1f} |" if k in qv else " | |"
        if before:
            row += f" {ms(before[k]):.1f} | {ms(before[k]) / ms(q[k]):.2f}x |" if k in before else " | |"
        res.append(row)
    res.append("")
    fused = ms(q["fusedPerChannelInt8"])
    api = ms(q["apiPerChannelInt8"])
    if np_ms:
        line = (f"NumPy {npr['numpy']} doing the fused job: {np_ms:.1f} ms ({np_what}), so the fused kernel is "
                f"**{np_ms / fused:.1f}x** faster (target 5x)")
        if qv:
            line += f", **{np_ms / ms(qv['fusedPerChannelInt8']):.1f}x** with the Vector API module"
        res.append(line + f"; the API path {np_ms / api:.1f}x.")
    line = f"The fused kernel takes **{fused / copy:.1f}x** the plain copy (target: within 2x)"
    if qv:
        line += f", **{ms(qv['fusedPerChannelInt8']) / ms(qv['plainCopy']):.1f}x** with the Vector API module"
    line += (f"; per-group int4 and NF4 through the API take {ms(q['apiPerGroupInt4']) / fused:.1f}x and "
             f"{ms(q['apiNf4']) / fused:.1f}x the fused figure (target: within 2x)")
    if qv:
        vf = ms(qv["fusedPerChannelInt8"])
        line += f", {ms(qv['apiPerGroupInt4']) / vf:.1f}x and {ms(qv['apiNf4']) / vf:.1f}x with the module"
    res.append(line + ".")
    res.append(f"Codebook k = 16 on 2^24 values through the API: **{ms(q['apiCodebook16On2To24']) / 1000:.2f} s** "
               f"(target: under 0.5 s).")
    res.append("")
    return res


cpu = load("QuantizeCpuTime.json")
if cpu:
    lines += quantize_section(
        "## Quantizing a 4096 x 4096 float32 matrix (thread CPU time)",
        "Medians of the benchmark thread's CPU time over interleaved repetitions (QuantizeCpuTime; every case is "
        "single-threaded). Used as the headline because the shared machine's load (10 to 15 on 2 cores) made the "
        "JMH wall-clock scores below swing by more than their own size. 'Vector API module': a JVM started with "
        "`--add-modules jdk.incubator.vector`, where the min/max reductions and the fused error sums run on the "
        "incubating Vector API with the same results bit for bit. 'Previous implementation': commit 8464e60, timed "
        "the same way in the same session.",
        cpu, load("QuantizeCpuTime-vector.json"), load("QuantizeCpuTime-before.json"),
        npr.get("median_cpu_ms") if npr else None, "median thread CPU time")

q = load("QuantizeBench.json")
if q:
    lines += quantize_section(
        "## Quantizing a 4096 x 4096 float32 matrix (JMH, wall clock)",
        "JMH average times (ms/op). On a quiet machine these are the figures to use; this run was made on a loaded "
        "one (see the error columns of the JSON files) and is kept for completeness.",
        q, load("QuantizeVectorBench.json"), load("QuantizeBench-before.json"),
        npr["median_ms"] if npr else None, "median wall clock")

ada = load("LearnedRoundingBench-adaptive.json")
if ada:
    lines += ["## Adaptive rounding, 512 x 512, 1024 samples, published defaults (10,000 iterations, batch 32)", ""]
    for k, row in ada.items():
        params = row.get("params", {})
        lines.append(f"- JMH {k} ({params.get('backend', '')}): {row['primaryMetric']['score']:.1f} s wall clock "
                     f"on the loaded machine (target: under 30 s with native BLAS)")
    af = os.path.join(out, "adaptive-cpu.json")
    if os.path.exists(af):
        with open(af) as f:
            a = json.load(f)
        # bench/adaptive/cpu_time.py: before and after in alternating JVMs, with the load average of the machine
        for r in a:
            ld = (f", load {r['load_before']:.1f} -> {r['load_after']:.1f}" if "load_before" in r else "")
            lines.append(f"- {r['what']}: {r['wall_s']:.1f} s wall, **{r['cpu_s']:.1f} s process CPU** "
                         f"({r['backend']}{ld})")
        cpu = {}
        for r in a:
            if "implementation" in r:
                cpu.setdefault(r["implementation"], []).append(r["cpu_s"])
        if "before" in cpu and "after" in cpu:
            b = statistics.median(cpu["before"])
            n = statistics.median(cpu["after"])
            lines.append(f"- process CPU, median of the repetitions: before {b:.1f} s, after {n:.1f} s: "
                         f"**{b / n:.2f}x less**")
    lines.append("")
fw = load("ForwardBench.json")
if fw:
    def pct(row, p):
        m = row["primaryMetric"]
        v = m["scorePercentiles"][p]
        unit = m["scoreUnit"]
        return v if unit.startswith("ms") else v / 1e6 if unit.startswith("ns") else v * 1000 if unit.startswith("s/") else v

    macs = 512 * (72 * 256 + 256 * 128 + 128 * 5)  # one forward pass of the sample classifier on 512 samples
    work = {"floatForward": 2 * macs, "integerForward": 2 * macs, "integerForwardSingleRounding": 2 * macs,
            "simulatedForward": 2 * macs, "peakSgemm": 2 * 1024 ** 3, "peakJavaFma": 2 * 1024 * 4096,
            "peakJavaInt32MulAdd": 2 * 1024 * 4096}
    labels = {"floatForward": "float forward (Network.forward)",
              "integerForward": "integer-only forward (IntegerNetwork, published double rounding)",
              "integerForwardSingleRounding": "integer-only forward, single-rounding requantization",
              "simulatedForward": "simulated (fake-quant) forward",
              "peakSgemm": "peak: float32 1024^3 sgemm (library linear algebra)",
              "peakJavaFma": "peak: Java float FMA loop (L1-resident)",
              "peakJavaInt32MulAdd": "peak: Java int32 multiply-add loop (L1-resident)"}
    rate = {}
    lines += ["## Forward passes of the sample classifier, batch 512 (ForwardBench)", "",
              "| benchmark | min ms | median ms | G op/s at min | G op/s at median |",
              "| --- | ---: | ---: | ---: | ---: |"]
    for k in labels:
        if k in fw:
            lo, med = pct(fw[k], "0.0"), pct(fw[k], "50.0")
            rate[k] = (work[k] / lo / 1e6, work[k] / med / 1e6)
            lines.append(f"| {labels[k]} | {lo:.3f} | {med:.3f} | {rate[k][0]:.2f} | {rate[k][1]:.2f} |")
    lines.append("")
    if all(k in rate for k in ("floatForward", "integerForward", "peakJavaFma", "peakJavaInt32MulAdd", "peakSgemm")):
        f, i = rate["floatForward"][0], rate["integerForward"][0]
        ratio = pct(fw["integerForward"], "0.0") / pct(fw["floatForward"], "0.0")
        ratio_med = pct(fw["integerForward"], "50.0") / pct(fw["floatForward"], "50.0")
        lines.append(f"At the fastest samples, the float pass runs at **{f:.1f} GFLOP/s** = "
                     f"**{f / rate['peakJavaFma'][0]:.0%}** of the Java FMA loop and {f / rate['peakSgemm'][0]:.0%} of "
                     f"the sgemm peak; the integer-only pass at **{i:.1f} GOP/s** = "
                     f"**{i / rate['peakJavaInt32MulAdd'][0]:.0%}** of the Java int32 multiply-add loop (targets: at "
                     f"least 30% of the machine's multiply-add throughput). The integer pass takes "
                     f"**{ratio:.2f}x** the float pass's time ({ratio_med:.2f}x at the medians; target: at most 2x).")
        lines.append("")
st = load("StudyBench.json")
if st:
    one = ms(st["oneSpec"])
    four = ms(st["fourSpecs"])
    mib = st["oneSpec"]["params"]["mib"]
    heap = {}
    for k in ("oneSpec", "fourSpecs"):
        path = os.path.join(out, f"StudyBench-heap-{k}.json")
        if os.path.exists(path):
            with open(path) as f:
                heap[k] = json.load(f)
    lines += [f"## Study of a {mib} MiB bf16 checkpoint (4096 x 4096 tensors), -Xmx1g", "",
              "| benchmark | ms | peak heap in use (MiB) |", "| --- | ---: | ---: |"]
    for k, label in [("oneSpec", "1 spec (int8)"),
                     ("fourSpecs", "4 specs (int8, int4 per-group(1,128), nf4, fp8-e4m3 per-channel(0))")]:
        h = heap.get(k, {}).get("peak_heap_mib")
        lines.append(f"| {label} | {ms(st[k]):.1f} | {'' if h is None else f'{h:.0f}'} |")
    lines += ["", f"Four specs take **{four / one:.2f}x** the time of one (target: at most 2.5x); both finish under "
              f"-Xmx1g (target: peak heap under 1 GiB).", "",
              f"Run at {mib} MiB ({int(mib) // 32} tensors of 4096 x 4096) instead of the issue's 2 GiB unless "
              "RUNGBOOK_STUDY_MIB=2048 is set: the work per tensor is the same. `Study` reads each tensor once and runs "
              "its specs in parallel on the cores; the ratio is set by the per-spec cost (int8 per channel takes the "
              "fused kernel, per-group int4, NF4 and FP8 the general per-segment path, and every spec pays for its "
              "own error report with the KL histograms). The \"peak heap in use\" counts garbage not yet collected: "
              "the JVM fills the 1 GiB it is given; the same study also finished under -Xmx400m (by hand).", ""]
print("\n".join(lines))
