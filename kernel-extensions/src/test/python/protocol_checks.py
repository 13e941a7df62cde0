"""Protocol-level checks of the Rungbook kernel through jupyter_client: output flood, bad signatures,
interrupts (library call, interruption-checking loop, tight loops, endless recursion, a Rungbook library loop), and
that the kernel still answers after exceptions, a StackOverflowError, an OutOfMemoryError and interrupts.

Run with JUPYTER_PATH pointing at the kernel spec under test. Prints one line per check; exits 1 on failure.
"""
import os
import shutil
import sys
import tempfile
import threading
import time

from jupyter_client.manager import start_new_kernel
from jupyter_client.session import Session

failures = []


def check(name, ok, detail=""):
    print(("PASS " if ok else "FAIL ") + name + ("" if ok else ": " + detail), flush=True)
    if not ok:
        failures.append(name)


def execute(kc, code, timeout=60, interrupt_after=None, km=None):
    """Runs code; returns (reply content, list of iopub messages up to idle)."""
    msg_id = kc.execute(code)
    if interrupt_after is not None:
        threading.Timer(interrupt_after, km.interrupt_kernel).start()
    msgs = []
    deadline = time.time() + timeout
    while True:
        m = kc.get_iopub_msg(timeout=max(1, deadline - time.time()))
        if m["parent_header"].get("msg_id") != msg_id:
            continue
        if m["msg_type"] == "status" and m["content"]["execution_state"] == "idle":
            break
        msgs.append(m)
    while True:
        r = kc.get_shell_msg(timeout=max(1, deadline - time.time()))
        if r["parent_header"].get("msg_id") == msg_id:
            return r["content"], msgs


def value(kc, code):
    reply, msgs = execute(kc, code)
    for m in msgs:
        if m["msg_type"] == "execute_result":
            return m["content"]["data"]["text/plain"]
    return None


def kernel_pid(km):
    """The kernel process id, from the kernel manager's launcher (jupyter_client 7 and later)."""
    proc = getattr(getattr(km, "provisioner", None), "process", None) or getattr(km, "kernel", None)
    return getattr(proc, "pid", None)


def gone(pid, seconds):
    """Whether process pid has ended (reaped or a zombie) within seconds."""
    deadline = time.time() + seconds
    while time.time() < deadline:
        try:
            with open("/proc/%d/stat" % pid) as f:
                if f.read().split(")")[-1].split()[0] == "Z":
                    return True
        except FileNotFoundError:
            return True
        time.sleep(0.2)
    return False


def main():
    km, kc = start_new_kernel(kernel_name="rungbook", startup_timeout=120)
    try:
        # Flood: 10^6 lines, all of them, in order, then the idle status.
        n = 1_000_000
        reply, msgs = execute(kc, 'for (int i = 0; i < %d; i++) System.out.println("line " + i);' % n, timeout=600)
        text = "".join(m["content"]["text"] for m in msgs if m["msg_type"] == "stream" and m["content"]["name"] == "stdout")
        lines = text.splitlines()
        streams = sum(1 for m in msgs if m["msg_type"] == "stream")
        check("flood: all %d lines arrive in order, batched" % n,
              reply["status"] == "ok" and lines == ["line %d" % i for i in range(n)] and streams < n / 10,
              "status=%s lines=%d stream messages=%d" % (reply["status"], len(lines), streams))

        # Text without a newline is sent while the cell still runs.
        msg_id = kc.execute('System.out.print("partial"); Thread.sleep(1500); System.out.println(" end");')
        first = None
        start = time.time()
        while True:
            m = kc.get_iopub_msg(timeout=30)
            if m["parent_header"].get("msg_id") != msg_id:
                continue
            if m["msg_type"] == "stream" and first is None:
                first = (time.time() - start, m["content"]["text"])
            if m["msg_type"] == "status" and m["content"]["execution_state"] == "idle":
                total = time.time() - start
                break
        check("stream: text without newline arrives before the cell ends",
              first is not None and first[1] == "partial" and first[0] < total - 0.5, str((first, total)))
        while kc.get_shell_msg(timeout=30)["parent_header"].get("msg_id") != msg_id:
            pass

        # Bad and missing signatures are dropped; the kernel keeps serving.
        for label, key in (("bad", b"not-the-key"), ("missing", b"")):
            rogue = Session(key=key, session=kc.session.session, username="intruder")
            rogue.send(kc.shell_channel.socket, "execute_request",
                       content={"code": "System.out.println(\"rogue\")", "silent": False, "store_history": True,
                                "user_expressions": {}, "allow_stdin": False, "stop_on_error": True})
            time.sleep(1.0)
            got = []
            try:
                while True:
                    got.append(kc.get_shell_msg(timeout=0.5))
            except Exception:
                pass
            check("signature: %s signature is dropped" % label, not got, str(got)[:300])
        check("signature: kernel still answers", value(kc, "40 + 2") == "42")

        # The same on the control channel: a forged shutdown_request must not stop the kernel.
        for label, key in (("bad", b"not-the-key"), ("missing", b"")):
            rogue = Session(key=key, session=kc.session.session, username="intruder")
            rogue.send(kc.control_channel.socket, "shutdown_request", content={"restart": False})
            time.sleep(1.0)
            check("signature: %s signature on control is dropped, the kernel lives" % label,
                  km.is_alive() and value(kc, "40 + 1") == "41")

        # A correctly signed message whose content part is not JSON is dropped; the kernel keeps serving.
        header = kc.session.msg_header("execute_request")
        parts = [kc.session.pack(header), b"{}", b"{}", b"{not json"]
        kc.shell_channel.socket.send_multipart([b"<IDS|MSG>", kc.session.sign(parts)] + parts)
        check("malformed JSON in a signed message: kernel answers the next message", value(kc, "39 + 3") == "42")

        # A correctly signed request from another session is answered like any other, and the kernel goes on.
        other = Session(key=kc.session.key, username="colleague")
        other.send(kc.shell_channel.socket, "kernel_info_request", content={})
        replies = []
        deadline = time.time() + 30
        while time.time() < deadline and not replies:
            try:
                r = kc.get_shell_msg(timeout=1)
                if r["parent_header"].get("session") == other.session:
                    replies.append(r)
            except Exception:
                pass
        check("another session's request is answered", replies and replies[0]["msg_type"] == "kernel_info_reply",
              str(replies)[:300])
        check("after another session: kernel still answers", value(kc, "38 + 4") == "42")

        # Malformed messages (too few frames, no delimiter) are dropped whole; the next message is not swallowed.
        kc.shell_channel.socket.send_multipart([b"<IDS|MSG>", b"0" * 64])
        kc.shell_channel.socket.send_multipart([b"just one frame"])
        check("malformed: kernel answers the next message", value(kc, "41 + 2") == "43")

        # Output of a background thread after its cell finished is dropped with a notice in the next cell.
        # A file handshake orders the events on a loaded machine: the thread prints only once the cell has
        # ended, and the next cell starts only once the thread has printed.
        handshake = tempfile.mkdtemp(prefix="rungbook-late-")
        go, printed = os.path.join(handshake, "go"), os.path.join(handshake, "printed")
        execute(kc, 'new Thread(() -> { try { var go = java.nio.file.Path.of("%s"); '
                    'while (!java.nio.file.Files.exists(go)) Thread.sleep(20); System.out.println("late"); '
                    'java.nio.file.Files.createFile(java.nio.file.Path.of("%s")); } catch (Exception e) { } }).start();'
                    % (go, printed))
        open(go, "w").close()
        deadline = time.time() + 30
        while time.time() < deadline and not os.path.exists(printed):
            time.sleep(0.05)
        reply, msgs = execute(kc, "1")
        notices = [m["content"]["text"] for m in msgs if m["msg_type"] == "stream" and m["content"]["name"] == "stderr"]
        check("background output after its cell is dropped with a notice",
              os.path.exists(printed) and any("arrived after it had finished and were dropped" in t for t in notices),
              "thread printed: %s, stderr of the next cell: %s, its messages: %s"
              % (os.path.exists(printed), notices, str([(m["msg_type"], m["content"]) for m in msgs])[:400]))
        shutil.rmtree(handshake, ignore_errors=True)

        # stop_on_error: requests already waiting when a cell fails are aborted, later ones run.
        ids = [kc.execute('Thread.sleep(300); throw new IllegalStateException("first fails");'),
               kc.execute('System.out.println("must not run");'),
               kc.execute('System.out.println("must not run either");')]
        statuses = {}
        while len(statuses) < 3:
            r = kc.get_shell_msg(timeout=60)
            if r["parent_header"].get("msg_id") in ids:
                statuses[r["parent_header"]["msg_id"]] = r["content"]["status"]
        check("stop_on_error: queued cells are aborted",
              [statuses[i] for i in ids] == ["error", "aborted", "aborted"], str([statuses[i] for i in ids]))
        check("stop_on_error: the next cell runs", value(kc, "2 + 3") == "5")

        # Exceptions do not harm the kernel.
        reply, msgs = execute(kc, 'throw new IllegalArgumentException("bad value 7");')
        errors = [m["content"] for m in msgs if m["msg_type"] == "error"]
        check("exception: ename is the class name", reply["status"] == "error" and errors
              and errors[0]["ename"] == "java.lang.IllegalArgumentException"
              and errors[0]["evalue"] == "bad value 7", str(errors))
        reply, msgs = execute(kc, "int depth(int n) { return depth(n + 1) + 1; }\ndepth(0)")
        errors = [m["content"] for m in msgs if m["msg_type"] == "error"]
        check("stack overflow: reported, traceback folded",
              errors and errors[0]["ename"] == "java.lang.StackOverflowError" and len(errors[0]["traceback"]) < 20,
              str(errors)[:500])
        reply, msgs = execute(kc, "{ var hog = new ArrayList<long[]>(); while (true) hog.add(new long[1 << 21]); }",
                              timeout=120)
        errors = [m["content"] for m in msgs if m["msg_type"] == "error"]
        check("out of memory: reported", errors and errors[0]["ename"] == "java.lang.OutOfMemoryError", str(errors)[:300])
        check("after errors: kernel still answers and keeps state",
              value(kc, "int kept = 5;\nkept * 3") == "15")

        # Interrupts: a blocking library call, a loop that checks for interruption, and a tight loop.
        cases = [
            ("library call (Thread.sleep)", "Thread.sleep(60_000);", "java.lang.InterruptedException"),
            ("loop checking Progress.checkInterrupted",
             "long n = 0; while (true) { dev.rungbook.progress.Progress.checkInterrupted(\"busy loop\"); n++; }",
             "dev.rungbook.progress.OperationInterruptedException"),
            ("tight loop", "long m = 0; while (m >= 0) { m = (m + 1) % 1000; }", "Interrupted"),
            # Ended by the stop checks compiled into cell code (no Thread.stop needed, so also on JDK 20 and 21).
            ("empty endless loop", "while (true) {}", "Interrupted"),
            ("endless recursion without loops",
             "long spread(int n) { return n < 2 ? 1 : spread(n - 1) + spread(n - 2); }\nspread(200)", "Interrupted"),
        ]
        for label, code, ename in cases:
            start = time.time()
            reply, msgs = execute(kc, code, timeout=60, interrupt_after=1.5, km=km)
            took = time.time() - start
            errors = [m["content"] for m in msgs if m["msg_type"] == "error"]
            ok = reply["status"] == "error" and errors and (ename is None or errors[0]["ename"] == ename) \
                and "nterrupt" in errors[0]["ename"] and took < 15
            check("interrupt: %s stops (%.1fs)" % (label, took), ok, str(errors)[:300])
            check("interrupt: kernel answers after %s" % label, value(kc, "kept + 1") == "6")

        # A long library loop (adaptive rounding asked for 10^8 iterations) stops at the interrupt with the best state
        # so far, as its contract says: the cell ends promptly with that result, and the kernel goes on.
        code = ("var rnd = new java.util.Random(1); float[] wv = new float[64 * 64]; float[] xv = new float[256 * 64];\n"
                "for (int i = 0; i < wv.length; i++) wv[i] = (float) rnd.nextGaussian();\n"
                "for (int i = 0; i < xv.length; i++) xv[i] = (float) rnd.nextGaussian();\n"
                "Quantizer.linear(4).rounding(Rounding.adaptive(Calibration.of(Tensor.of(xv, 256, 64)))"
                ".iterations(100_000_000)).apply(Tensor.of(wv, 64, 64))")
        start = time.time()
        reply, msgs = execute(kc, code, timeout=60, interrupt_after=1.5, km=km)
        took = time.time() - start
        results = [m["content"]["data"]["text/plain"] for m in msgs if m["msg_type"] == "execute_result"]
        check("interrupt: adaptive rounding stops with its best state so far (%.1fs)" % took,
              reply["status"] == "ok" and results and results[0].startswith("Quantized [64, 64]") and took < 15,
              str(reply)[:200] + str(results)[:200])
        check("interrupt: kernel answers after adaptive rounding", value(kc, "kept + 1") == "6")

        # A restart (shutdown_request with restart) gives a clean session in a new process; the old one is gone.
        old_pid = kernel_pid(km)
        km.restart_kernel(now=False)
        kc.wait_for_ready(timeout=120)
        reply, msgs = execute(kc, "kept")
        errors = [m["content"] for m in msgs if m["msg_type"] == "error"]
        check("restart: clean session", reply["status"] == "error" and errors and errors[0]["ename"] == "CompileError",
              str(errors)[:300])
        check("restart: kernel answers", value(kc, "1 + 1") == "2")
        check("restart: the old kernel process has exited", old_pid is not None and gone(old_pid, 30), str(old_pid))
        # A shutdown request ends the kernel process (no stray JVM left behind).
        pid = kernel_pid(km)
        kc.shutdown()
        check("shutdown: the kernel process exits", pid is not None and gone(pid, 30), str(pid))
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)
    print("%d failure(s)" % len(failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
