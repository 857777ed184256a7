"""Worker functions for the isolation tests (module-level so a spawned child can import them)."""

import os
import signal
import time


def work(x):
    if x == "segfault":
        os.kill(os.getpid(), signal.SIGSEGV)
    if x == "exit":
        os._exit(7)
    if x == "raise":
        raise ValueError("bad molecule")
    if x == "sleep":
        time.sleep(30)
    return f"done {x} in {os.getpid()}"
