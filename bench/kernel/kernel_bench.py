"""Kernel performance through a real Jupyter client (jupyter_client), as a user's front end sees it.

Measures: kernel start to the first executed cell; the round trip of a trivial cell (median); a 600x400 XChart chart
cell, warm (median); a cell whose value is a 10^5-row Tablesaw table (median). Round trip = from sending
execute_request until both the execute_reply and the idle status have arrived.

Run with JUPYTER_PATH pointing at a folder holding kernels/rungbook (bench/kernel/run does that). Writes JSON to the
file named by the first argument and prints a Markdown table.
"""
import json
import statistics
import sys
import time

from jupyter_client.manager import KernelManager

TARGETS = {"start_to_first_cell_s": 2.5, "trivial_cell_ms": 50, "chart_cell_ms": 250, "table_cell_ms": 300}


def run(kc, code, timeout=120):
    """Executes code; returns (seconds, reply content, mime types of the results)."""
    t0 = time.perf_counter()
    msg_id = kc.execute(code)
    idle = replied = False
    reply = None
    mimes = []
    deadline = time.time() + timeout
    while not (idle and replied):
        if not idle:
            m = kc.get_iopub_msg(timeout=max(0.1, deadline - time.time()))
            if m["parent_header"].get("msg_id") == msg_id:
                if m["msg_type"] in ("execute_result", "display_data"):
                    mimes += list(m["content"]["data"])
                elif m["msg_type"] == "status" and m["content"]["execution_state"] == "idle":
                    idle = True
        if not replied:
            try:
                r = kc.get_shell_msg(timeout=0 if not idle else max(0.1, deadline - time.time()))
                if r["parent_header"].get("msg_id") == msg_id:
                    reply = r["content"]
                    replied = True
            except Exception:
                pass
    elapsed = time.perf_counter() - t0
    if reply["status"] != "ok":
        raise SystemExit("cell failed: %r -> %s %s" % (code, reply.get("ename"), reply.get("evalue")))
    return elapsed, reply, mimes


def median_ms(kc, code, warm, runs):
    for _ in range(warm):
        run(kc, code)
    return statistics.median(run(kc, code)[0] for _ in range(runs)) * 1000


def main():
    out_path = sys.argv[1]
    t0 = time.perf_counter()
    km = KernelManager(kernel_name="rungbook")
    km.start_kernel()
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=120)
        run(kc, "1 + 1")
        start_s = time.perf_counter() - t0

        trivial = median_ms(kc, "1 + 1", warm=30, runs=100)

        run(kc, """
            double[] xs = new double[1000], ys = new double[1000];
            for (int i = 0; i < xs.length; i++) { xs[i] = i; ys[i] = Math.sin(i / 50.0); }
            """)
        chart_code = ('var chart = new XYChartBuilder().width(600).height(400).title("bench").build();\n'
                      'chart.addSeries("sin", xs, ys);\nchart')
        _, _, chart_mimes = run(kc, chart_code)
        chart = median_ms(kc, chart_code, warm=5, runs=15)

        run(kc, """
            double[] col = new double[100_000];
            for (int i = 0; i < col.length; i++) col[i] = i * 0.5;
            Table big = Table.create("big", DoubleColumn.create("x", col), IntColumn.indexColumn("i", col.length, 0));
            """)
        _, _, table_mimes = run(kc, "big")
        table = median_ms(kc, "big", warm=5, runs=15)
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)

    result = {"start_to_first_cell_s": round(start_s, 3), "trivial_cell_ms": round(trivial, 1),
              "chart_cell_ms": round(chart, 1), "table_cell_ms": round(table, 1),
              "chart_mime_types": sorted(set(chart_mimes)), "table_mime_types": sorted(set(table_mimes)),
              "targets": TARGETS}
    with open(out_path, "w") as f:
        json.dump(result, f, indent=2)
    rows = [("kernel start to first executed cell", "%.2f s" % start_s, "< 2.5 s", start_s < 2.5),
            ("trivial cell `1 + 1`, median of 100", "%.1f ms" % trivial, "< 50 ms", trivial < 50),
            ("600x400 XChart chart cell, warm, median of 15", "%.1f ms" % chart, "< 250 ms", chart < 250),
            ("10^5-row Table cell, median of 15", "%.1f ms" % table, "< 300 ms", table < 300)]
    print("| measure | result | target | met |\n| --- | ---: | ---: | :---: |")
    for name, v, target, ok in rows:
        print("| %s | %s | %s | %s |" % (name, v, target, "yes" if ok else "**no**"))


if __name__ == "__main__":
    main()
