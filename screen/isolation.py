"""Per-molecule isolation: a crash inside a native library costs one molecule.

The xTB and RDKit back ends are compiled code; a segmentation fault or an
abort there would kill a Python process outright, and with it a whole shard.
:class:`IsolatedWorker` runs a function in a long-lived child process (started
with ``spawn``, so no native state is shared) and talks to it over a pipe. If
the child dies, the call raises :class:`WorkerCrash` naming the signal (a native crash, or SIGKILL: out of
memory or killed from outside), a fresh child is started, and the caller records that one molecule as failed.
"""

from __future__ import annotations

import multiprocessing as mp
import signal
from collections.abc import Callable

from screen.errors import CalculationError

__all__ = ["WorkerCrash", "IsolatedWorker"]


class WorkerCrash(CalculationError):
    """The child process died or timed out while working on one item."""


def _serve(conn, func) -> None:  # pragma: no cover - runs in the child process
    conn.send(("ready", None))  # imports are done: time limits count from here
    while True:
        try:
            args = conn.recv()
        except EOFError:
            return
        if args is None:
            return
        try:
            conn.send(("ok", func(*args)))
        except Exception as exc:  # noqa: BLE001 - every Python error goes back to the parent
            conn.send(("error", (type(exc).__name__, str(exc))))


#: the signals a crash of the native code itself raises (a bad access, an abort, an arithmetic fault)
_CRASHES = {signal.SIGSEGV, signal.SIGBUS, signal.SIGABRT, signal.SIGFPE, signal.SIGILL}


def _describe_exit(code: int | None) -> str:
    if code is None:
        return "did not exit"
    if code == -signal.SIGKILL:  # no crash of the native code: the kernel (out of memory) or someone killed it
        return "was killed by signal SIGKILL (out of memory or killed from outside)"
    if code < 0:
        try:
            name = signal.Signals(-code).name
        except ValueError:
            return f"was killed by signal {-code}"
        return f"was killed by signal {name} ({'native crash' if -code in _CRASHES else 'killed from outside'})"
    return f"exited with code {code}"


class IsolatedWorker:
    """Call ``func(*args)`` in a child process that survives between calls.

    Parameters
    ----------
    func : callable
        A module-level (picklable) function.
    timeout_s : float, optional
        Longest time one call may take [s], not counting the child's start-up;
        the child is killed after it.

    Examples
    --------
    >>> import math
    >>> with IsolatedWorker(math.sqrt) as w:
    ...     w(16.0)
    4.0
    """

    def __init__(self, func: Callable, timeout_s: float | None = None):
        self.func = func
        self.timeout_s = timeout_s
        self._ctx = mp.get_context("spawn")
        self._proc = None
        self._conn = None

    def _start(self) -> None:
        parent, child = self._ctx.Pipe()
        self._proc = self._ctx.Process(target=_serve, args=(child, self.func), daemon=True)
        self._proc.start()
        child.close()
        self._conn = parent
        try:
            parent.recv()  # the "ready" handshake
        except EOFError:
            self._proc.join(5)
            reason = _describe_exit(self._proc.exitcode)
            self._discard()
            raise WorkerCrash(f"worker process {reason} while starting") from None

    def _discard(self) -> None:
        if self._proc is not None and self._proc.pid is not None:  # pid is None if start() failed
            if self._proc.is_alive():
                self._proc.kill()
            self._proc.join(5)
        if self._conn is not None:
            self._conn.close()
        self._proc = self._conn = None

    def __call__(self, *args):
        """Run one item; Python exceptions are re-raised as ``RuntimeError`` with the original text.

        Raises
        ------
        WorkerCrash
            The child died (signal or exit) or exceeded ``timeout_s``.
        RuntimeError
            ``func`` raised; the message is ``"<ExceptionType>: <text>"``.
        """
        if self._proc is None or not self._proc.is_alive():
            self._discard()
            self._start()
        self._conn.send(args)
        if not self._conn.poll(self.timeout_s):
            self._discard()
            raise WorkerCrash(f"worker process timed out after {self.timeout_s:g} s")
        try:
            status, value = self._conn.recv()
        except (EOFError, ConnectionResetError):
            self._proc.join(5)
            reason = _describe_exit(self._proc.exitcode)
            self._discard()
            raise WorkerCrash(f"worker process {reason}; this molecule is recorded as failed") from None
        if status == "error":
            raise RuntimeError(f"{value[0]}: {value[1]}")
        return value

    def close(self) -> None:
        """Stop the child process."""
        if self._conn is not None and self._proc is not None and self._proc.is_alive():
            try:
                self._conn.send(None)
            except (BrokenPipeError, OSError):
                pass
            self._proc.join(5)
        self._discard()

    def __enter__(self) -> IsolatedWorker:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
