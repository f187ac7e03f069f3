"""Units for pool tests that need a module the pool's processes can import."""

import os
import time
from pathlib import Path


def report_pid_then_sleep(folder: str, index: int, seconds: float) -> int:
    """Write this process's pid to ``folder/unit-<index>``, sleep ``seconds`` (s), return the pid."""
    (Path(folder) / f"unit-{index}").write_text(str(os.getpid()))
    time.sleep(seconds)
    return os.getpid()
