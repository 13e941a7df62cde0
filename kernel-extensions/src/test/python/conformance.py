"""Jupyter's kernel conformance suite (jupyter_kernel_test) against the Rungbook kernel.

Run with JUPYTER_PATH pointing at a folder whose kernels/rungbook holds the kernel spec under test.
Every check the suite offers has a sample here.
"""
import sys
import unittest

import jupyter_kernel_test


class RungbookKernelTests(jupyter_kernel_test.KernelTests):
    kernel_name = "rungbook"
    language_name = "java"
    file_extension = ".jsh"

    code_hello_world = 'System.out.println("hello, world");'
    code_stderr = 'System.err.println("oops");'

    completion_samples = [
        {"text": "dev.rungbook.progress.Progress.sil", "matches": {"silent()"}},
        {"text": "int a = 1;\nTable.crea", "matches": {"create("}},
    ]

    complete_code_samples = ["1 + 1", "int a = 1;", "for (int i = 0; i < 3; i++) {\n}\n", "class P {}", ""]
    incomplete_code_samples = ["for (int i = 0; i < 3; i++) {", "int b = 2 +", "class Q {"]
    invalid_code_samples = ["}", "\"unterminated"]

    code_page_something = "Math.max?"

    code_generate_error = "throw new IllegalStateException(\"boom\");"

    code_execute_result = [
        {"code": "6 * 7", "result": "42"},
        {"code": "\"tab\" + \"le\"", "result": "table"},
        {"code": "tech.tablesaw.api.Table.create(\"t\", tech.tablesaw.api.IntColumn.create(\"n\", 1, 2))",
         "mime": "text/html"},
    ]

    code_display_data = [
        {"code": "display(tech.tablesaw.api.Table.create(\"t\", tech.tablesaw.api.IntColumn.create(\"n\", 1)));",
         "mime": "text/html"},
        {"code": "display(\"plain\");", "mime": "text/plain"},
    ]

    code_history_pattern = "6 * ?"
    supported_history_operations = ("tail", "range", "search")

    code_inspect_sample = "Math.max"

    code_clear_output = "clearOutput();"


if __name__ == "__main__":
    result = unittest.main(argv=[sys.argv[0], "-v"], exit=False).result
    sys.exit(0 if result.wasSuccessful() and result.testsRun > 0 and not result.skipped else 1)
