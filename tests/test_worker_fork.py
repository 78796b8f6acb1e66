"""The ngspice worker forked from its client: used when no other thread is alive, exec'd as a fresh
interpreter when one is, recovered the same way after a crash, and never writing what the client
had buffered. Each scenario runs in a Python process of its own (a test runner may leave threads
alive, and the stdout under test must be a real pipe); real workers, real signals, no mocks.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap

from check_support import needs_library
from conftest import EXAMPLES

# Helpers the scenarios share: a worker's command line as the kernel shows it, and whether its
# process is gone (killed and reaped).
PRELUDE = textwrap.dedent("""\
    import json, os, signal, sys, threading
    from bridge.netlist.emit import SpiceDeck
    from bridge.sim.client import NgspiceSession

    def cmdline(pid):
        with open(f"/proc/{pid}/cmdline", "rb") as file:
            return file.read().decode().split("\\0")[:-1]

    def gone(pid):
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return True
        return False

    SMALL = SpiceDeck("small\\nV1 a 0 1\\nR1 a b 1k\\nR2 b 0 1k\\n.op\\n.end\\n", "test deck")
    """)


def scenario(body: str, *args: str) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ)
    env.pop("PYTHONUNBUFFERED", None)  # stdout a pipe, so block-buffered, as it usually is
    completed = subprocess.run([sys.executable, "-c", PRELUDE + textwrap.dedent(body), *args], env=env,
                               capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL)
    assert completed.returncode == 0, completed.stderr
    return completed


def report(body: str, *args: str) -> dict:
    return json.loads(scenario(body, *args).stdout.splitlines()[-1])


@needs_library
def test_with_no_other_thread_the_worker_is_forked_from_this_process():
    seen = report("""
        held = open(sys.executable, "rb")  # a file of this process's own: not the worker's
        with NgspiceSession() as session:
            session.spawn()
            session.version  # the handshake
            pid = session.worker_pid
            out, capture = os.readlink(f"/proc/{pid}/fd/1"), session._worker.capture_path
            print(json.dumps({"worker": cmdline(pid), "own": cmdline(os.getpid()),
                              "ppid": int(open(f"/proc/{pid}/stat").read().rsplit(")", 1)[1].split()[1]),
                              "forked": session.worker_forked, "b": session.run(SMALL).scalar("b"),
                              "cwd": os.readlink(f"/proc/{pid}/cwd"), "fds": sorted(os.listdir(f"/proc/{pid}/fd")),
                              "me": os.getpid(), "out": out, "capture": capture}))
        """)
    # A fork runs this very command line; an exec'd worker's is `python -m bridge.sim.worker ...`.
    assert seen["worker"] == seen["own"]
    assert seen["ppid"] == seen["me"]
    assert seen["forked"] is True  # the worker's handshake says how it started
    assert seen["b"] == 0.5
    # As the exec'd worker: requests on 0, the capture on 1 and 2, the response pipe, nothing else;
    # in its private folder, not the caller's.
    assert len(seen["fds"]) == 4 and seen["fds"][:3] == ["0", "1", "2"]
    assert seen["out"] == seen["capture"]
    assert "biasbridge-ngspice-" in seen["cwd"]


@needs_library
def test_with_another_thread_alive_the_worker_is_exec_d_and_a_later_respawn_forks():
    seen = report("""
        release = threading.Event()
        bar = threading.Thread(target=release.wait, daemon=True)  # a progress bar's thread, say
        bar.start()
        with NgspiceSession() as session:
            session.spawn()
            first = session.worker_pid
            session.run(SMALL)
            # Read once it has answered: just after an exec the kernel may still show an empty one.
            first_line, first_forked = cmdline(first), session.worker_forked
            release.set()
            bar.join()
            os.kill(first, signal.SIGKILL)  # the next run finds it dead and starts another
            try:
                session.run(SMALL)
            except Exception:  # seen before or while sending: either way the next one runs
                pass
            b = session.run(SMALL).scalar("b")
            second = session.worker_pid
            print(json.dumps({"first": first_line, "first_forked": first_forked, "second": cmdline(second),
                              "second_forked": session.worker_forked, "own": cmdline(os.getpid()), "b": b,
                              "first_gone": gone(first)}))
        """)
    assert seen["first"][1:3] == ["-m", "bridge.sim.worker"], seen["first"]
    assert seen["first_forked"] is False
    assert seen["second"] == seen["own"] and seen["second_forked"] is True
    assert seen["b"] == 0.5 and seen["first_gone"]


@needs_library
def test_a_forked_worker_killed_mid_batch_fails_that_netlist_and_the_next_gets_a_new_forked_worker():
    seen = report("""
        from bridge.check import check_circuit, start_check
        from bridge.netlist import read_netlist

        circuits = [read_netlist(path) for path in sys.argv[1:]]
        with NgspiceSession() as own:
            assert check_circuit(circuits[0], own, tolerance=0.05).agree
            pid = own.worker_pid
            forked = own.worker_forked
            os.kill(pid, signal.SIGSTOP)  # the next deck stays in flight until the kill
            pending = start_check(circuits[1], own, tolerance=0.05)
            os.kill(pid, signal.SIGKILL)
            crashed = pending.finish()
            recovered = check_circuit(circuits[2], own, tolerance=0.05)
            print(json.dumps({
                "forked": forked, "pid": pid, "gone": gone(pid),
                "crash": [f.message for f in crashed.findings if f.code == "sim-crashed"],
                "crashed_sim": [c.sim for c in crashed.nodes.values()],
                "recovered": recovered.agree and recovered.simulator is not None,
                "new_pid": own.worker_pid, "new_forked": own.worker_forked,
                "started": own.workers_started}))
        """, *(str(EXAMPLES / name) for name in ("cs_divider.cir", "diode_connected.cir", "drain_feedback.cir")))
    assert seen["forked"] is True
    (message,) = seen["crash"]
    assert "SIGKILL" in message and str(seen["pid"]) in message
    assert all(value is None for value in seen["crashed_sim"])
    assert seen["gone"]  # killed and reaped by the client
    assert seen["recovered"]
    assert seen["new_pid"] not in (None, seen["pid"]) and seen["new_forked"] is True
    assert seen["started"] == 2


@needs_library
def test_what_the_client_had_buffered_on_stdout_is_written_once():
    # stdout is a pipe here, so block-buffered: the text is still in the buffer at the fork. The
    # worker runs decks, is retired by ngspice (an undefined parameter: it leaves through its exit
    # path), another is forked and killed; the text must come out once, from this process alone.
    completed = scenario("""
        sys.stdout.write("pending-before-the-fork|")
        with NgspiceSession() as session:
            session.spawn()
            session.run(SMALL)
            capture = open(session._worker.capture_path).read()
            try:
                session.run(SpiceDeck("undefined parameter\\nV1 1 0 1\\nR1 1 0 {nosuchparam}\\n.op\\n.end\\n", "t"))
            except Exception:
                pass
            sys.stdout.write("pending-at-the-respawn|")
            session.run(SMALL)
            os.kill(session.worker_pid, signal.SIGKILL)
            try:
                session.run(SMALL)
            except Exception:
                pass
            session.run(SMALL)
            forked = session.worker_forked
        sys.stdout.write(json.dumps({"capture": capture, "forked": forked}) + "\\n")
        """)
    out = completed.stdout
    assert out.count("pending-before-the-fork|") == 1 and out.count("pending-at-the-respawn|") == 1, out
    assert out.startswith("pending-before-the-fork|pending-at-the-respawn|")
    last = json.loads(out.rsplit("|", 1)[1])
    assert last["forked"] is True
    assert "pending" not in last["capture"]
    assert "pending" not in completed.stderr


@needs_library
def test_the_cli_s_sigterm_handler_is_not_the_forked_worker_s():
    # `biasbridge` turns SIGTERM into SystemExit; in a forked worker that would unwind into the
    # client's code. The worker must die of SIGTERM as an exec'd one does.
    seen = report("""
        signal.signal(signal.SIGTERM, lambda number, frame: (_ for _ in ()).throw(SystemExit(143)))
        with NgspiceSession() as session:
            session.spawn()
            session.run(SMALL)
            pid = session.worker_pid
            os.kill(pid, signal.SIGTERM)
            returncode = session._worker.process.wait(timeout=10)
            print(json.dumps({"returncode": returncode, "forked": session.worker_forked}))
        """)
    # Unwinding in the worker would end it with exit status 1 (the traceback in its capture).
    assert seen["forked"] is True
    assert seen["returncode"] == -signal.SIGTERM, seen
