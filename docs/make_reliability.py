#!/usr/bin/env python3
"""Regenerates the figures of docs/reliability.md from the outputs of a test run.

Run from the repository root after the tests (for example `./rungbook test`, or the focused runs named below):

    python3 docs/make_reliability.py

Each section of the page between `<!-- begin:NAME -->` and `<!-- end:NAME -->` is rebuilt from its source, if that
source exists; a section whose source is missing keeps its current text (the script says which). Only figures that a
run wrote are used:

  fuzz      api/target/fuzz/<reader>.log (written by `./rungbook fuzz`), appended once to docs/fuzz-runs.tsv, the
            committed record of every fuzzing run; the table sums that record per reader
  hostile   api/target/hostile-outcomes.tsv (HostileCorpusTest)
  numeric   api/target/numeric-hostility.tsv (NumericHostilityTest) and the surefire reports of
            NumericHostilityTest and LearnedRoundingHostilityTest
  writers   api/target/writer-kill.tsv (WriterKillTest)
  kernel    kernel-extensions/target/kernel-faults.txt (JupyterClientsTest, the PASS/FAIL lines of
            protocol_checks.py)

The page is written atomically (a temporary file in docs/, then a rename).
"""
import csv
import datetime
import glob
import os
import re
import sys
import tempfile
import textwrap
import xml.etree.ElementTree as ET

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PAGE = os.path.join(ROOT, "docs", "reliability.md")
FUZZ_RECORD = os.path.join(ROOT, "docs", "fuzz-runs.tsv")
API = os.path.join(ROOT, "api", "target")
KERNEL = os.path.join(ROOT, "kernel-extensions", "target")

READERS = [("safetensors", "safetensors header + data"), ("shardedIndex", "sharded index JSON"),
           ("npy", ".npy header"), ("npz", ".npz container"), ("parse", "quantizer spec text"),
           ("planJson", "plan JSON")]


def read_tsv(path):
    with open(path, encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f, delimiter="\t", quoting=csv.QUOTE_NONE))


def para(text):
    """Wraps a paragraph to the page's line width."""
    return textwrap.fill(text, 118, break_long_words=False, break_on_hyphens=False)


def md(text):
    """Escapes a table cell."""
    return text.replace("|", "\\|").replace("\n", " ")


# ---------------------------------------------------------------------------------------------------------- fuzz

def fuzz_log_figures(path):
    """(date, seconds, executions, findings) of one `./rungbook fuzz` log, or None if it holds no libFuzzer status.

    libFuzzer prints `#N <event> ...` status lines while it runs and `Done N runs in S second(s)` when it stops by
    itself; `./rungbook fuzz` stops it with timeout(1), so the last status line gives a lower bound on executions.
    """
    text = open(path, encoding="utf-8", errors="replace").read()
    header = re.search(r"# rungbook fuzz (\S+) minutes=(\d+) start=(\S+) end=(\S+) rc=(\d+)", text, re.M)
    if not header:
        return None
    done = re.search(r"Done (\d+) runs in (\d+) second", text)
    status = re.findall(r"^#(\d+)\s", text, re.M)
    if done:
        executions = int(done.group(1))
    elif status:
        executions = int(status[-1])
    else:
        return None
    start = datetime.datetime.fromisoformat(header.group(3).replace("Z", "+00:00"))
    end = datetime.datetime.fromisoformat(header.group(4).replace("Z", "+00:00"))
    findings = len(re.findall(r"^== Java Exception:|^==\d+== ERROR: libFuzzer", text, re.M))
    return {"reader": header.group(1), "date": start.strftime("%Y-%m-%d"), "start": header.group(3),
            "seconds": str(int((end - start).total_seconds())), "executions": str(executions),
            "findings": str(findings),
            "source": "log of ./rungbook fuzz, %s (not in git)" % os.path.relpath(path, ROOT)}


def update_fuzz_record():
    fields = ["reader", "date", "start", "seconds", "executions", "findings", "source"]
    rows = read_tsv(FUZZ_RECORD) if os.path.exists(FUZZ_RECORD) else []
    known = {(r["reader"], r["start"]) for r in rows}
    added = 0
    for log in sorted(glob.glob(os.path.join(API, "fuzz", "*.log"))):
        fig = fuzz_log_figures(log)
        if fig and (fig["reader"], fig["start"]) not in known:
            rows.append(fig)
            added += 1
    if added:
        write_atomically(FUZZ_RECORD, "\t".join(fields) + "\n"
                         + "".join("\t".join(r[k] for k in fields) + "\n" for r in rows))
    return rows, added


def fuzz_section(rows):
    out = ["| reader | runs | last run (UTC) | minutes | executions | findings | fixes |",
           "|---|---|---|---|---|---|---|"]
    for key, label in READERS:
        mine = [r for r in rows if r["reader"] == key]
        if not mine:
            out.append("| %s | not yet fuzzed beyond the seeds | | | | | |" % label)
            continue
        minutes = sum(int(r["seconds"]) for r in mine) / 60
        execs = sum(int(r["executions"]) for r in mine)
        findings = sum(int(r["findings"]) for r in mine)
        fixes = "none needed" if findings == 0 else "see the corpus files named crash-*"
        out.append("| %s | %d | %s | %.0f | %s | %d | %s |" % (label, len(mine), max(r["date"] for r in mine),
                                                         minutes, format(execs, ","), findings, fixes))
    out.append("")
    out.append(para("Executions are libFuzzer's own count (a lower bound when the run was stopped by the time "
                    "limit); every run is recorded in `docs/fuzz-runs.tsv`."))
    return "\n".join(out)


# ---------------------------------------------------------------------------------------------------------- hostile

def hostile_section(path):
    rows = []
    with open(path, encoding="utf-8") as f:
        for line in f:
            line = line.rstrip("\n")
            if not line or "\t" not in line:
                continue
            name, message = line.split("\t", 1)
            rows.append((name, message))
    out = ["| file | refusal (after the file name) |", "|---|---|"]
    for name, message in sorted(rows):
        out.append("| `%s` | %s |" % (name, md(message)))
    out.append("")
    out.append("%d files, each refused as documented." % len(rows))
    return "\n".join(out)


# ---------------------------------------------------------------------------------------------------------- numeric

def surefire(cls):
    """(tests, failures + errors, skipped) of a test class from its surefire XML report, or None."""
    for base in (API, KERNEL):
        for path in glob.glob(os.path.join(base, "surefire-reports", "TEST-*%s.xml" % cls)):
            root = ET.parse(path).getroot()
            return (int(root.get("tests")), int(root.get("failures")) + int(root.get("errors")),
                    int(root.get("skipped")))
    return None


GRID_FAMILIES = ["linear", "float", "mx", "nf4", "log", "codebook", "binary", "ternary"]


def cell(h, r):
    if r == 0:
        return "✓ %d" % h
    if h == 0:
        return "refused %d" % r
    return "✓ %d, refused %d" % (h, r)


def numeric_section(path):
    rows = read_tsv(path)
    by = {(r["input"], r["family"]): r for r in rows}
    inputs = sorted({r["input"] for r in rows})
    families = sorted({r["family"] for r in rows})
    ranges = [f for f in families if f.startswith("range ")]
    roundings = [f for f in families if f.startswith("rounding ")]
    grids = [f for f in GRID_FAMILIES if f in families]
    handled = sum(int(r["handled"]) for r in rows)
    refused = sum(int(r["refused"]) for r in rows)
    out = []
    status = surefire("NumericHostilityTest")
    if status is not None and status[0] < handled + refused:
        status = None  # the report is of a partial run (one method), not of the run that wrote the matrix
    learned = surefire("LearnedRoundingHostilityTest")
    out.append(para("`NumericHostilityTest` ran %d (spec, input) cells: %d handled, %d refused with an "
               "IllegalArgumentException naming the tensor and the problem%s." % (
                   handled + refused, handled, refused,
                   "" if status is None else "; the class ran %d tests, %d failed" % (status[0], status[1]))))
    out.append("")
    out.append(para("Handled means: finite dequantized values; the exact values the grid's definition gives where "
                    "one exists (all-zero segments to exact zeros; constant segments to the constant on grids whose "
                    "top level is the segment's max, float formats to within half an ulp; the largest value on the "
                    "top level; with round to nearest, 1e-30 beside 1e30 to 0 on grids with a zero level); no NaN "
                    "in the ErrorReport, its per-channel table or a Study table (infinity only where ErrorReport "
                    "documents it: the SQNR of an exact or zero-signal result)."))
    out.append("")

    def table(title, cols, label):
        out.append("**%s** (number of specs per cell)" % title)
        out.append("")
        out.append("| input | " + " | ".join(label(c) for c in cols) + " |")
        out.append("|---|" + "---|" * len(cols))
        for i in inputs:
            cells = []
            for c in cols:
                r = by.get((i, c))
                cells.append("" if r is None else cell(int(r["handled"]), int(r["refused"])))
            out.append("| %s | %s |" % (i.replace("_", " "), " | ".join(cells)))
        out.append("")

    table("Grids", grids, lambda c: c)
    table("Range rules", ranges, lambda c: c[len("range "):])
    table("Element roundings", roundings, lambda c: c[len("rounding "):])
    reasons = {}
    for r in rows:
        for why in filter(None, r["refusals"].split("; ")):
            reasons.setdefault(why, set()).add(r["input"].replace("_", " "))
    out.append(para("Refusal reasons: " + "; ".join("%s (%s)" % (why, ", ".join(sorted(ins)))
                                                   for why, ins in sorted(reasons.items())) + "."))
    if learned is not None:
        out.append("")
        out.append(para("Learned roundings (`LearnedRoundingHostilityTest`, adaptive rounding and error feedback): NaN "
                   "and infinite calibration inputs and NaN weights refused naming the tensor and the position; "
                   "all-zero calibration inputs, identical calibration samples and all-zero weights handled "
                   "(%d tests, %d failed)." % (learned[0], learned[1])))
    return "\n".join(out)


# ---------------------------------------------------------------------------------------------------------- writers

def writers_section(path):
    rows = read_tsv(path)
    out = ["| case | outcome |", "|---|---|"]
    for r in rows:
        out.append("| %s | %s |" % (md(r["case"]), md(r["outcome"])))
    status = surefire("WriterKillTest")
    if status is not None and status[0] < len(rows):
        status = None  # a partial run's report
    out.append("")
    out.append(para("`WriterKillTest` starts the writer in a separate JVM and kills it with SIGKILL "
               "(`Process.destroyForcibly`)%s. A killed writer leaves its temporary file `.<target>.<random>.tmp` "
               "beside the target (nothing runs after SIGKILL to remove it); it is never read as the target and "
               "can be deleted." % ("" if status is None else "; %d tests, %d failed" % (status[0], status[1]))))
    return "\n".join(out)


# ---------------------------------------------------------------------------------------------------------- kernel

def kernel_section(path):
    lines = [l.strip() for l in open(path, encoding="utf-8", errors="replace")]
    passed = [l[5:] for l in lines if l.startswith("PASS ")]
    failed = [l[5:] for l in lines if l.startswith("FAIL ")]
    out = [para("Checked through a real Jupyter client by `kernel-extensions/src/test/python/protocol_checks.py` "
                "(run by JupyterClientsTest): %d checks passed, %d failed." % (len(passed), len(failed))), ""]
    for p in passed:
        out.append("- %s" % p)
    for f in failed:
        out.append("- FAILED: %s" % f)
    return "\n".join(out)


# ---------------------------------------------------------------------------------------------------------- page

def write_atomically(path, text):
    fd, tmp = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".", suffix=".tmp",
                               dir=os.path.dirname(path))
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        if os.path.exists(path):
            os.chmod(tmp, os.stat(path).st_mode & 0o777)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def replace_section(page, name, body):
    pattern = re.compile(r"(<!-- begin:%s -->\n).*?(\n<!-- end:%s -->)" % (name, name), re.S)
    if not pattern.search(page):
        sys.exit("docs/reliability.md has no section markers for '%s'" % name)
    return pattern.sub(lambda m: m.group(1) + body + m.group(2), page)


def main():
    page = open(PAGE, encoding="utf-8").read()
    fuzz_rows, added = update_fuzz_record()
    sources = [
        ("fuzz", FUZZ_RECORD, lambda p: fuzz_section(fuzz_rows)),
        ("hostile", os.path.join(API, "hostile-outcomes.tsv"), hostile_section),
        ("numeric", os.path.join(API, "numeric-hostility.tsv"), numeric_section),
        ("writers", os.path.join(API, "writer-kill.tsv"), writers_section),
        ("kernel", os.path.join(KERNEL, "kernel-faults.txt"), kernel_section),
    ]
    for name, src, build in sources:
        if os.path.exists(src) and os.path.getsize(src) > 0:
            page = replace_section(page, name, build(src))
            print("%-8s from %s" % (name, os.path.relpath(src, ROOT)))
        else:
            print("%-8s kept: %s not found (run its tests first)" % (name, os.path.relpath(src, ROOT)))
    if added:
        print("fuzz     %d new run(s) added to docs/fuzz-runs.tsv" % added)
    write_atomically(PAGE, page)


if __name__ == "__main__":
    main()
