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
          ("fusedPerGroupInt4", "fused kernel: int4 per-group 128 + dequantize + MSE/SQNR"),
          ("fusedNf4", "fused kernel: NF4 block 64 + dequantize + MSE/SQNR"),
          ("apiPerChannelInt8", "API: same spec, apply + error().sqnrDb()"),
          ("apiPerChannelInt8AllMetrics", "API: same spec, every metric incl. KL of histograms"),
          ("apiPerGroupInt4", "API: int4 per-group 128"),
          ("apiNf4", "API: NF4 block 64"),
          ("apiCodebook16On2To24", "API: codebook k=16 on 2^24 values"),
          ("apiFp8PerChannel", "API: FP8 E4M3 per-channel"),
          ("applyPerChannelInt8", "apply only: per-channel asym int8 (fused row kernel)"),
          ("applyPerGroupInt4", "apply only: int4 per-group 128"),
          ("applyNf4", "apply only: NF4 block 64"),
          ("applyFp8PerChannel", "apply only: FP8 E4M3 per-channel"),
          ("studyOneSpec", "study share of one tensor: int8, every metric"),
          ("studyFourSpecs", "study share of one tensor: int8, int4 g128, nf4, fp8 per-channel, every metric")]

def load_numpy(name):
    path = os.path.join(out, name)
    if not os.path.exists(path):
        return None
    with open(path) as f:
        return json.load(f)


# numpy-quantize.json is timed with the CPU-time harness; numpy-quantize-jmh.json, when present, is the NumPy run
# made in the session of the JMH results (so that each table's ratio compares figures of one session).
npr = load_numpy("numpy-quantize.json")
npr_jmh = load_numpy("numpy-quantize-jmh.json") or npr


def quantize_section(title, note, q, qv, before, np_ms, np_what, before_label="previous implementation", np_row=None,
                     np_codebook=None):
    np_row = np_row or npr
    copy = ms(q["plainCopy"])
    cols = "| benchmark | ms | x plain copy |"
    sep = "| --- | ---: | ---: |"
    if qv:
        cols += " ms, Vector API module | x plain copy |"
        sep += " ---: | ---: |"
    if before:
        cols += f" ms, {before_label} | speed-up |"
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
        line = (f"NumPy {np_row['numpy']} doing the fused job: {np_ms:.1f} ms ({np_what}), so the fused kernel is "
                f"**{np_ms / fused:.1f}x** faster (target 5x)")
        if qv:
            line += f", **{np_ms / ms(qv['fusedPerChannelInt8']):.1f}x** with the Vector API module"
        res.append(line + f"; the API path {np_ms / api:.1f}x.")
    line = f"The fused kernel takes **{fused / copy:.1f}x** the plain copy (target: within 2x)"
    if qv:
        line += f", **{ms(qv['fusedPerChannelInt8']) / ms(qv['plainCopy']):.1f}x** with the Vector API module"
    if "fusedPerGroupInt4" in q and "fusedNf4" in q:
        line += (f"; the same fused job per group takes **{ms(q['fusedPerGroupInt4']) / fused:.1f}x** (int4, groups "
                 f"of 128) and **{ms(q['fusedNf4']) / fused:.1f}x** (NF4, blocks of 64) the per-channel figure "
                 f"(target: within 2x)")
        if qv and "fusedPerGroupInt4" in qv and "fusedNf4" in qv:
            vf = ms(qv["fusedPerChannelInt8"])
            line += (f", **{ms(qv['fusedPerGroupInt4']) / vf:.1f}x** and **{ms(qv['fusedNf4']) / vf:.1f}x** with "
                     f"the module")
    line += (f"; per-group int4 and NF4 through the API take {ms(q['apiPerGroupInt4']) / fused:.1f}x and "
             f"{ms(q['apiNf4']) / fused:.1f}x the fused per-channel figure (the API also builds the full error "
             f"report)")
    if "apiFp8PerChannel" in q:
        line += f", FP8 E4M3 per channel {ms(q['apiFp8PerChannel']) / fused:.1f}x"
    if qv:
        vf = ms(qv["fusedPerChannelInt8"])
        line += f"; {ms(qv['apiPerGroupInt4']) / vf:.1f}x and {ms(qv['apiNf4']) / vf:.1f}x with the module"
        if "apiFp8PerChannel" in qv:
            line += f" (FP8 {ms(qv['apiFp8PerChannel']) / vf:.1f}x)"
    res.append(line + ".")
    if all(k in q for k in ("applyPerGroupInt4", "applyNf4", "applyFp8PerChannel", "applyPerChannelInt8")):
        line = ("`apply` alone (codes, scales and dequantized values, no error report) takes "
                f"{ms(q['applyPerGroupInt4']) / fused:.1f}x (int4 per-group), {ms(q['applyNf4']) / fused:.1f}x (NF4) "
                f"and {ms(q['applyFp8PerChannel']) / fused:.1f}x (FP8 per channel) the fused figure, against "
                f"{ms(q['applyPerChannelInt8']) / fused:.1f}x for per-channel int8 on the fused row kernel")
        if qv and all(k in qv for k in ("applyPerGroupInt4", "applyNf4", "applyFp8PerChannel")):
            vf = ms(qv["fusedPerChannelInt8"])
            line += (f"; {ms(qv['applyPerGroupInt4']) / vf:.1f}x, {ms(qv['applyNf4']) / vf:.1f}x and "
                     f"{ms(qv['applyFp8PerChannel']) / vf:.1f}x with the module")
        res.append(line + ".")
    if "studyFourSpecs" in q and "studyOneSpec" in q:
        line = (f"A study's work per tensor on one thread (every metric per spec): four specs take "
                f"**{ms(q['studyFourSpecs']) / ms(q['studyOneSpec']):.2f}x** the time of one (target: at most 2.5x)")
        if before and "studyFourSpecs" in before:
            line += f", {ms(before['studyFourSpecs']) / ms(q['studyOneSpec']):.2f}x on the {before_label}"
        res.append(line + ".")
    line = (f"Codebook k = 16 on 2^24 values through the API: **{ms(q['apiCodebook16On2To24']) / 1000:.2f} s** "
            f"(target: under 0.5 s)")
    if qv and "apiCodebook16On2To24" in qv:
        line += f", **{ms(qv['apiCodebook16On2To24']) / 1000:.2f} s** with the Vector API module"
    if np_codebook:
        line += (f"; NumPy {np_codebook['numpy']}'s sort-based Lloyd loop on the same kind of data took "
                 f"{np_codebook['median_cpu_ms'] / 1000:.2f} s ({np_codebook['steps']} steps to a 1e-7 change, "
                 f"`bench/numpy/codebook_baseline.py`, CPU time of the latest run), which the library's fit (an exact "
                 f"or certified optimum, not a local one) takes {ms(q['apiCodebook16On2To24']) / np_codebook['median_cpu_ms']:.1f}x")
    res.append(line + ".")
    res.append("")
    return res


cpu = load("QuantizeCpuTime.json")
if cpu:
    cpu_forks = next(iter(cpu.values()))["primaryMetric"].get("forks", 1)
    fork_note = (f"each figure is the median of {cpu_forks} fresh JVMs' medians, run one after the other, since one "
                 "JVM's compiled code is one draw (the JSON files list every fork's median under forkMedians)"
                 if cpu_forks > 1 else "one JVM")
    lines += quantize_section(
        "## Quantizing a 4096 x 4096 float32 matrix (thread CPU time)",
        "Medians of the benchmark thread's CPU time over interleaved repetitions (QuantizeCpuTime; every case is "
        f"single-threaded; {fork_note}; read the ratios, since this shared machine's speed varies from session to "
        "session: the plain copy of the matrix has taken 9 to 14 ms). Used as the headline because on a shared machine "
        "the JMH wall-clock scores below swing by more than their own size. 'Vector API module': a JVM started with "
        "`--add-modules jdk.incubator.vector`, where the min/max reductions and the fused error sums run on the "
        "incubating Vector API with the same results bit for bit. 'General path': the cases that the fused segment "
        "kernels serve (per-group int4, NF4, FP8 per channel) run again with the kernels switched off "
        "(`-Drungbook.segmentKernels=false` set around each call), interleaved with the rest in the same run; the "
        "results are the same bits either way (SegmentKernelsTest). 'apply only' cases leave out the error report.",
        cpu, load("QuantizeCpuTime-vector.json"), load("QuantizeCpuTime-before.json"),
        npr.get("median_cpu_ms") if npr else None, "median thread CPU time", "general path",
        np_codebook=load_numpy("numpy-codebook.json"))

q = load("QuantizeBench.json")
if q:
    lines += quantize_section(
        "## Quantizing a 4096 x 4096 float32 matrix (JMH, wall clock)",
        "JMH average times (ms/op), one JVM per benchmark class: one draw of the JIT's compiled code (see "
        "DEVELOPERS.md), so the thread-CPU table above, the median of three JVMs, is the headline; the JSON files "
        "give each score's error. A 'previous implementation' column appears when QuantizeBench-before.json, made "
        "by hand with that version's jar in the same session, is present.",
        q, load("QuantizeVectorBench.json"), load("QuantizeBench-before.json"),
        npr_jmh["median_ms"] if npr_jmh else None, "median wall clock", np_row=npr_jmh)

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
fc = {}
fcpath = os.path.join(out, "ForwardCpuTime.json")
if os.path.exists(fcpath):
    with open(fcpath) as f:
        fc = {r["benchmark"].rsplit(".", 1)[1]: r for r in json.load(f)}
fw = load("ForwardBench.json")
if fw:
    def pct(row, p):
        m = row["primaryMetric"]
        v = m["scorePercentiles"][p]
        unit = m["scoreUnit"]
        return v if unit.startswith("ms") else v / 1e6 if unit.startswith("ns") else v * 1000 if unit.startswith("s/") else v

    macs = 512 * (72 * 256 + 256 * 128 + 128 * 5)  # one forward pass of the sample classifier on 512 samples
    cnn_macs = 512 * (8 * 9 * 256 + 16 * 72 * 64 + 4 * 256)  # the thermal conv net, batch norms folded
    steps = 1 << 18  # VectorPeaks.STEPS; lanes from ForwardCpuTime.json when present (16 with AVX-512)
    vf = fc["peakVectorFma"]["macs"] if "peakVectorFma" in fc else steps * 12 * 16
    vi = fc["peakVectorInt32MulAdd"]["macs"] if "peakVectorInt32MulAdd" in fc else steps * 8 * 16
    work = {"floatForward": 2 * macs, "cnnFloatForward": 2 * cnn_macs, "integerForward": 2 * macs,
            "integerForwardSingleRounding": 2 * macs, "simulatedForward": 2 * macs, "peakSgemm": 2 * 1024 ** 3,
            "peakVectorFma": 2 * vf, "peakVectorInt32MulAdd": 2 * vi, "peakJavaFma": 2 * 1024 * 4096,
            "peakJavaInt32MulAdd": 2 * 1024 * 4096}
    labels = {"floatForward": "float forward, conveyor-mlp (Network.forward)",
              "cnnFloatForward": "float forward, thermal-cnn (batch norms folded)",
              "integerForward": "integer-only forward, conveyor-mlp (IntegerNetwork, published double rounding)",
              "integerForwardSingleRounding": "integer-only forward, single-rounding requantization",
              "simulatedForward": "simulated (fake-quant) forward, conveyor-mlp",
              "peakSgemm": "peak: float32 1024^3 sgemm (library linear algebra, 1 thread)",
              "peakVectorFma": "peak: float FMA, accumulators in registers (Vector API)",
              "peakVectorInt32MulAdd": "peak: int32 multiply-add, accumulators in registers (Vector API)",
              "peakJavaFma": "streaming Java float FMA loop (L1-resident arrays)",
              "peakJavaInt32MulAdd": "streaming Java int32 multiply-add loop (L1-resident arrays)"}
    rate = {}
    lines += ["## Forward passes of the sample networks, batch 512 (ForwardBench)", "",
              "One thread throughout (forward passes and peaks; OPENBLAS_NUM_THREADS=1), JVM with the Vector API "
              "module as the notebook kernel runs.", "",
              "| benchmark | min ms | median ms | G op/s at min | G op/s at median |",
              "| --- | ---: | ---: | ---: | ---: |"]
    for k in labels:
        if k in fw:
            lo, med = pct(fw[k], "0.0"), pct(fw[k], "50.0")
            rate[k] = (work[k] / lo / 1e6, work[k] / med / 1e6)
            lines.append(f"| {labels[k]} | {lo:.3f} | {med:.3f} | {rate[k][0]:.2f} | {rate[k][1]:.2f} |")
    lines.append("")
    if all(k in rate for k in ("floatForward", "integerForward", "peakVectorFma", "peakVectorInt32MulAdd")):
        f, i = rate["floatForward"][0], rate["integerForward"][0]
        ratio = pct(fw["integerForward"], "0.0") / pct(fw["floatForward"], "0.0")
        ratio_med = pct(fw["integerForward"], "50.0") / pct(fw["floatForward"], "50.0")
        lines.append(f"At the fastest samples, the classifier's float pass runs at **{f:.1f} GFLOP/s** = "
                     f"**{f / rate['peakVectorFma'][0]:.0%}** of the register-resident FMA peak; the integer-only "
                     f"pass at **{i:.1f} GOP/s** = **{i / rate['peakVectorInt32MulAdd'][0]:.0%}** of the int32 "
                     f"multiply-add peak (targets: at least 30%). The integer pass takes **{ratio:.2f}x** the float "
                     f"pass's time ({ratio_med:.2f}x at the medians; target: at most 2x).")
        lines.append("")
if fc:
    def op(k):
        return 2 * fc[k]["macs"] / fc[k]["primaryMetric"]["score"] / 1e6

    some = next(iter(fc.values()))
    lines += ["## Forward passes by thread CPU time, this version and the previous one side by side (ForwardCpuTime)",
              "",
              f"One JVM ({'with' if some['vectorModule'] else 'without'} the Vector API module), one thread, cases "
              f"interleaved, medians of {some['primaryMetric']['repetitions']} repetitions; the previous version "
              f"({some['before'] or 'not given'}) runs in its own class loader. Load average "
              f"{some['loadStart'].split()[0]} at the start, {some['loadEnd'].split()[0]} at the end."
              + (" Before the passes the JVM quantized a 1024 x 1024 matrix once with each of int8, int4 per-group "
                 "128, NF4, 16- and 32-level codebooks and FP8 per channel, as a notebook would (a quantizer kernel "
                 "that shares a Vector API shape with the passes would show here)."
                 if some.get('quantizersFirst') else ""), "",
              "| case | previous ms | this ms | speed-up | G op/s | share of its peak | wall ms |",
              "| --- | ---: | ---: | ---: | ---: | ---: | ---: |"]
    peak_of = {"mlpFloatForward": "peakVectorFma", "cnnFloatForward": "peakVectorFma",
               "mlpSimulatedForward": "peakVectorFma", "mlpIntegerForward": "peakVectorInt32MulAdd"}
    for k in ("mlpFloatForward", "mlpIntegerForward", "mlpSimulatedForward", "cnnFloatForward"):
        if k not in fc:
            continue
        now = fc[k]["primaryMetric"]["score"]
        prev = fc.get(k + "Before", {}).get("primaryMetric", {}).get("score")
        pk = peak_of[k]
        share = f"{op(k) / op(pk):.0%}" if pk in fc else "n/a"
        lines.append(f"| {k} | {prev:.3f} | {now:.3f} | {prev / now:.2f}x | {op(k):.1f} | {share} | "
                     f"{fc[k]['primaryMetric']['wallMedian']:.3f} |" if prev else
                     f"| {k} | n/a | {now:.3f} | n/a | {op(k):.1f} | {share} | "
                     f"{fc[k]['primaryMetric']['wallMedian']:.3f} |")
    for k in ("peakVectorFma", "peakVectorInt32MulAdd", "peakSgemm", "peakJavaFma", "peakJavaInt32MulAdd"):
        if k in fc:
            lines.append(f"| {k} | | {fc[k]['primaryMetric']['score']:.3f} | | {op(k):.1f} | | "
                         f"{fc[k]['primaryMetric']['wallMedian']:.3f} |")
    lines.append("")
    if "mlpFloatForward" in fc and "mlpIntegerForward" in fc:
        r = fc["mlpIntegerForward"]["primaryMetric"]["score"] / fc["mlpFloatForward"]["primaryMetric"]["score"]
        lines.append(f"The integer-only pass takes **{r:.2f}x** the float pass's CPU time (target: at most 2x). "
                     "The peaks keep everything in registers and hardly feel the other work on the machine; the "
                     "forward passes read their weights and activations from the caches, which that work also "
                     "uses, so their shares are lower under load.")
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
    loads = [heap[k][x] for k in heap for x in ("load_average_start", "load_average_end") if x in heap[k]]
    load_note = (f" Load average during the runs: {min(loads):.1f} to {max(loads):.1f} on {os.cpu_count()} cores "
                 "(wall-clock figures on a loaded machine overstate both times and the ratio; see the CPU-time table "
                 "below)." if loads else "")
    lines += ["", f"Four specs take **{four / one:.2f}x** the time of one (target: at most 2.5x); both finish under "
              f"-Xmx1g (target: peak heap under 1 GiB).{load_note}", "",
              (f"Run at the issue's size, {mib} MiB ({int(mib) // 32} tensors of 4096 x 4096; "
               "RUNGBOOK_STUDY_MIB=2048). " if int(mib) >= 2048 else
               f"Run at {mib} MiB ({int(mib) // 32} tensors of 4096 x 4096) instead of the issue's 2 GiB unless "
               "RUNGBOOK_STUDY_MIB=2048 is set: the work per tensor is the same. ") + "`Study` reads each tensor once, counts "
              "its values once for the KL histograms of all its specs (`ErrorReport.reference`), and feeds the specs "
              "to the cores from one queue of (tensor, spec) jobs over at most two tensors at a time, so no core waits "
              "at the end of a tensor; one spec runs on one thread. The ratio is set by the per-spec cost of the "
              "three specs beyond int8 (per-group int4, NF4 and FP8 quantize kernels, then each spec's error sums and "
              "histogram of its own dequantized values). The \"peak heap in use\" counts garbage not yet collected: "
              "the JVM fills the 1 GiB it is given.", ""]
sc = load("StudyCpuTime.json")
if sc:
    one, four = sc["oneSpec"], sc["fourSpecs"]
    lines += [f"### The same studies by process CPU time ({one['params']['mib']} MiB, interleaved, medians)", "",
              "| study | process CPU ms | wall ms |", "| --- | ---: | ---: |",
              f"| 1 spec | {ms(one):.0f} | {one['wallMedianMs']:.0f} |",
              f"| 4 specs | {ms(four):.0f} | {four['wallMedianMs']:.0f} |", "",
              f"CPU 4/1 = **{ms(four) / ms(one):.2f}x**; on 2 cores kept busy the wall-clock ratio is about half of "
              f"that, {ms(four) / ms(one) / 2:.2f}x. Load average {one['loadAverageStart']:.1f} at the start, "
              f"{one['loadAverageEnd']:.1f} at the end (the wall clock is only meaningful on a quiet machine).", ""]
ba_path = os.path.join(out, "StudyCpuTime-before-after.json")
if os.path.exists(ba_path):
    with open(ba_path) as f:
        ba = json.load(f)
    def mean_of(lib, name):
        v = [r["primaryMetric"]["score"] for r in ba if r["library"] == lib and r["benchmark"].endswith(name)]
        return sum(v) / len(v)
    b1, b4, a1, a4 = (mean_of("before", "oneSpec"), mean_of("before", "fourSpecs"), mean_of("after", "oneSpec"),
                      mean_of("after", "fourSpecs"))
    loads = [r[k] for r in ba for k in ("loadAverageStart", "loadAverageEnd")]
    lines += ["### Before and after the shared reference counts and the job queue (one session, process CPU ms)", "",
              "JVMs alternating before, after, before, after (StudyCpuTime, 3 rounds each after a warm-up; the mean "
              f"of the two JVMs' medians). Load average {min(loads):.1f} to {max(loads):.1f}.", "",
              "| study | before | after | after / before |", "| --- | ---: | ---: | ---: |",
              f"| 1 spec | {b1:.0f} | {a1:.0f} | {a1 / b1:.2f} |",
              f"| 4 specs | {b4:.0f} | {a4:.0f} | {a4 / b4:.2f} |",
              f"| CPU ratio 4/1 | {b4 / b1:.2f} | {a4 / a1:.2f} | |", ""]
print("\n".join(lines))
