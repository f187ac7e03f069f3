"""The pool processes of a worker killed outright (SIGKILL) exit too, instead of lingering as orphans."""

import os
import signal
import subprocess
import sys
import textwrap
import time

from tests.support.live import REPO_ROOT

# A parent that runs two long units in a pool of two processes; each unit writes its pid, then sleeps.
PARENT = textwrap.dedent("""
    import functools, sys
    from tests.support.pool_units import report_pid_then_sleep
    from worker.execution.parallel import run_units

    if __name__ == "__main__":
        units = [functools.partial(report_pid_then_sleep, sys.argv[1], index, 120.0) for index in range(2)]
        run_units(units, total=2, on_progress=lambda progress: None, workers=2,
                  preload=["tests.support.pool_units"])
""")


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # A zombie has ended; only its exit status waits to be read.
    with open(f"/proc/{pid}/stat") as stat:
        return stat.read().rsplit(")", 1)[1].split()[0] != "Z"


def _wait_until(condition, timeout_s: float) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.1)
    return condition()


def test_pool_processes_exit_when_the_process_that_started_them_is_killed(tmp_path):
    parent = subprocess.Popen([sys.executable, "-c", PARENT, str(tmp_path)], cwd=REPO_ROOT)
    pids: list[int] = []
    try:
        assert _wait_until(lambda: len(list(tmp_path.glob("unit-*"))) == 2, 60), "the units did not start"
        pids = [int(path.read_text()) for path in tmp_path.glob("unit-*")]
        assert all(_alive(pid) for pid in pids)
        parent.send_signal(signal.SIGKILL)
        parent.wait(timeout=30)
        assert _wait_until(lambda: not any(_alive(pid) for pid in pids), 30), "pool processes outlived their owner"
    finally:
        if parent.poll() is None:
            parent.kill()
            parent.wait()
        for pid in pids:
            if _alive(pid):
                os.kill(pid, signal.SIGKILL)
