"""Executes a notebook on the Rungbook kernel with nbclient and checks the MIME types of each cell's outputs.

Run with JUPYTER_PATH pointing at the kernel spec under test. Prints one line per cell; exits 1 on failure.
"""
import sys

import nbformat
from nbclient import NotebookClient

# (source, expected output types, expected MIME types of the rich outputs)
CELLS = [
    ("1 + 1", ["execute_result"], {"text/plain"}),
    ('System.out.println("hello");', ["stream"], set()),
    ('Table t = Table.create("ranges", DoubleColumn.create("scale", 0.5, 0.25, 1e-7), '
     'StringColumn.create("rule", "min-max", "mse", "percentile"));\nt', ["execute_result"],
     {"text/plain", "text/html"}),
    ('XYChart c = new XYChartBuilder().width(600).height(400).title("error vs bits").build();\n'
     'c.addSeries("mse", new double[] {2, 4, 8}, new double[] {0.3, 0.05, 0.001});\nc',
     ["execute_result"], {"text/plain", "image/png", "image/svg+xml"}),
    ('String id = display("first");\nupdateDisplay(id, "second");', ["display_data"], {"text/plain"}),
    ('var p = progress();\nfor (int i = 0; i <= 20; i++) { p.update("fitting", i, 20, 1.0 / (i + 1)); '
     'Thread.sleep(20); }\np.finish("fitting");', ["display_data"], {"text/plain", "text/html"}),
    ('Integer.parseInt("seven")', ["error"], set()),
]


def main():
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(src) for src, _, _ in CELLS]
    client = NotebookClient(nb, kernel_name="rungbook", timeout=120, startup_timeout=120, allow_errors=True)
    client.execute()
    failures = 0
    for cell, (src, types, mimes) in zip(nb.cells, CELLS):
        outputs = cell.outputs
        got_types = [o.output_type for o in outputs]
        got_mimes = set()
        for o in outputs:
            got_mimes |= set(o.get("data", {}).keys())
        ok = got_types == types and got_mimes == mimes
        if src.startswith("String id"):
            ok = ok and outputs[0]["data"]["text/plain"] == "second"
        if src.startswith("Integer.parseInt"):
            ok = ok and outputs[0]["ename"] == "java.lang.NumberFormatException"
        if src.startswith("var p"):
            ok = ok and "100%" in outputs[0]["data"]["text/plain"] and "done" in outputs[0]["data"]["text/plain"]
        print(("PASS " if ok else "FAIL ") + src.splitlines()[0][:50] + " -> " + str(got_types) + " " +
              str(sorted(got_mimes)) + ("" if ok else " " + str(outputs)[:400]), flush=True)
        failures += 0 if ok else 1
    print("%d failure(s)" % failures)
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
