"""Per-molecule isolation: a crash inside a native library costs one molecule.

The xTB and RDKit back ends are compiled code; a segmentation fault or an
abort there would kill a Python process outright, and with it a whole shard.
:class:`IsolatedWorker` runs a function in a long-lived child process (started
with ``spawn``, so no native state is shared) and talks to it over a pipe. If
the child dies, the call raises :class:`WorkerCrash` naming the signal (a native crash, or SIGKILL: out of
memory or killed from outside), a fresh child is started, and the caller records that one molecule as failed.

A ``spawn`` child imports the main script again before it starts (as ``__mp_main__``). A script that calls
the compute functions at its top level, not under ``if __name__ == "__main__":``, therefore ran the same
call again in every child: the child's molecule failed with multiprocessing's bootstrapping error and both
processes wrote the same files (a Python user's audit). :class:`IsolatedWorker` now refuses to start a child
from such a call with :class:`MainGuardMissing`, one message that says to add the guard: before spawning when
the main script's top-level statement that is running is not under the guard (:func:`unguarded_call_site`),
and, where that cannot be seen (a call from a thread), when the child finds itself starting a worker while it
re-imports the script (it then exits at once, writes nothing, and the parent raises the error). A notebook or
an interactive session has no main script to re-import and is not affected; nor is ``python - < script.py``
(``__file__`` ``<stdin>``, which multiprocessing would have every child run and fail on: it is hidden while a
child starts, :func:`_no_script_to_import`).
"""

from __future__ import annotations

import ast
import contextlib
import multiprocessing as mp
import os
import signal
import sys
import threading
from collections.abc import Callable

from screen.errors import EXIT_USAGE, CalculationError, DascreenError

__all__ = ["WorkerCrash", "MainGuardMissing", "IsolatedWorker", "unguarded_call_site"]


class WorkerCrash(CalculationError):
    """The child process died or timed out while working on one item."""


class MainGuardMissing(DascreenError):
    """A script starts worker processes from code that runs again when a ``spawn`` child imports it.

    Deliberately neither a :class:`ValueError` nor a :class:`RuntimeError`: the per-molecule handlers, which
    record those as one failed molecule, let it through, so the whole call stops with this one message.
    """

    exit_code = EXIT_USAGE


#: exit status of a worker that found itself starting a worker while its bootstrap re-imports the main script
#: (:meth:`IsolatedWorker._start`); the parent turns it into :class:`MainGuardMissing`
_NO_GUARD_EXIT = 86

_GUARD_FIX = ('put the script\'s work under `if __name__ == "__main__":` (every worker process imports the script '
              'again and would run it too; see docs/python.md); the molecules\' own workers can also be avoided with '
              'the setting execution.isolate: false (levels_of(..., config={"execution": {"isolate": False}}), '
              'run_compute(..., isolate=False)), where a native crash then stops the script, but the time-limited '
              'ring-perception check of large macrocycles always uses a worker')


def _is_main_test(test: ast.expr) -> str | None:
    """``"!="`` when ``test`` is ``__name__ != "__main__"`` (either order), ``"=="`` for any other test that
    involves ``__name__`` and ``"__main__"`` (``==``, ``in ("__main__",)``, ``... and len(sys.argv) > 1``), else None.

    A test the rule reads as a guard although it is not one is caught in the child instead (:func:`_bootstrapping`);
    a real guard read as none would refuse a correct script (a review: ``and`` and ``in`` forms were refused).

    Examples
    --------
    >>> [_is_main_test(ast.parse(t, mode="eval").body) for t in ('__name__ == "__main__"', '"__main__" != __name__',
    ...  '__name__ in ("__main__",)', '__name__ == "__main__" and x', 'x > 1')]
    ['==', '!=', '==', '==', None]
    """
    names = [n for n in ast.walk(test) if isinstance(n, ast.Name) and n.id == "__name__"]
    mains = [n for n in ast.walk(test) if isinstance(n, ast.Constant) and n.value == "__main__"]
    if not names or not mains:
        return None
    plain_not_equal = (isinstance(test, ast.Compare) and len(test.ops) == 1 and isinstance(test.ops[0], ast.NotEq))
    return "!=" if plain_not_equal else "=="


def _guarded_lines(source: str) -> list[tuple[int, int]]:
    """Line ranges of a script that run only when it is the main program (the ``if __name__ == "__main__":``
    body, or the ``else`` of ``!=``)."""
    ranges = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.If):
            kind = _is_main_test(node.test)
            block = node.body if kind == "==" else node.orelse if kind == "!=" else []
            if block:
                ranges.append((block[0].lineno, block[-1].end_lineno or block[-1].lineno))
    return ranges


def unguarded_call_site() -> str | None:
    """``"<script>, line N"`` when a ``spawn`` child would run the current call again, else None.

    A ``spawn`` child re-imports the main script (multiprocessing's rule: a module run with ``-m`` by its
    name, a script by its path; none for an interactive session, a notebook, ``python -c`` or a
    ``__main__`` module of a package). The call is run again when the script's top-level statement that is
    executing now (the main module's frame on this thread's stack) is not in the body of an
    ``if __name__ == "__main__":``. None as well when that cannot be seen: no main-module frame on the stack
    (a thread, a callback after the script ended) or a source that cannot be read.

    Examples
    --------
    >>> unguarded_call_site() is None  # under pytest, doctest or the console script: a guarded main program
    True
    >>> _guarded_lines("import x\\nif __name__ == '__main__':\\n    x.run()\\n    x.end()\\n")
    [(3, 4)]
    """
    main = sys.modules.get("__main__")
    if main is None:
        return None
    name = getattr(getattr(main, "__spec__", None), "name", None)
    path = getattr(main, "__file__", None)
    if name is not None and (name == "__main__" or name.endswith(".__main__")):
        return None  # multiprocessing does not re-import these
    if not path or (name is None and os.path.splitext(os.path.basename(path))[0] == "ipython"):
        return None
    frame = sys._getframe(1)
    while frame is not None and not (frame.f_globals is main.__dict__ and frame.f_code.co_name == "<module>"):
        frame = frame.f_back
    if frame is None:
        return None
    line = frame.f_lineno
    try:
        with open(frame.f_code.co_filename, encoding="utf-8") as fh:
            ranges = _guarded_lines(fh.read())
    except (OSError, SyntaxError, ValueError, UnicodeDecodeError):
        return None
    if any(first <= line <= last for first, last in ranges):
        return None
    return f"{frame.f_code.co_filename}, line {line}"


@contextlib.contextmanager
def _no_script_to_import():
    """Hide the main module's ``__file__`` from ``spawn`` while a child starts, when it names no script a child
    could import (``<stdin>`` of ``python -``, a missing file, a notebook's ``.ipynb`` that some front ends set).

    multiprocessing would have the child run that path and fail before it starts (``FileNotFoundError:
    .../<stdin>``: every molecule of a ``python -`` session failed); without it the child starts as it does from
    a notebook or an interactive session.
    """
    with _HIDE_LOCK:  # threads starting workers at once must not hide and restore it under each other (a review)
        main = sys.modules.get("__main__")
        path = getattr(main, "__file__", None) if main is not None else None
        hide = False
        if path and getattr(getattr(main, "__spec__", None), "name", None) is None:
            full = path if os.path.isabs(path) else os.path.join(mp.process.ORIGINAL_DIR or os.getcwd(), path)
            hide = not os.path.isfile(full) or full.endswith(".ipynb")
        if not hide:
            yield
            return
        del main.__file__
        try:
            yield
        finally:
            main.__file__ = path


#: held while a worker starts with the main module's ``__file__`` hidden (:func:`_no_script_to_import`)
_HIDE_LOCK = threading.Lock()


def _bootstrapping() -> bool:
    """True in a ``spawn`` child while it re-imports the main script (before it runs its own target)."""
    return bool(getattr(mp.process.current_process(), "_inheriting", False))


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
        """Start the child; refuse a call that every child would run again (:class:`MainGuardMissing`).

        Raises
        ------
        MainGuardMissing
            The main script starts the worker from a statement outside ``if __name__ == "__main__":``.
        WorkerCrash
            The child died while starting.
        """
        if _bootstrapping():  # a worker re-importing the main script got here: it stops before it writes anything,
            os._exit(_NO_GUARD_EXIT)  # and its parent says why (MainGuardMissing, one message)
        site = unguarded_call_site()
        if site is not None:
            raise MainGuardMissing(f"{site} starts worker processes at the script's top level; {_GUARD_FIX}")
        parent, child = self._ctx.Pipe()
        self._proc = self._ctx.Process(target=_serve, args=(child, self.func), daemon=True)
        with _no_script_to_import():
            self._proc.start()
        child.close()
        self._conn = parent
        try:
            parent.recv()  # the "ready" handshake
        except EOFError:
            self._proc.join(5)
            code = self._proc.exitcode
            reason = _describe_exit(code)
            self._discard()
            if code == _NO_GUARD_EXIT:
                raise MainGuardMissing(f"the main script {getattr(sys.modules.get('__main__'), '__file__', '')} "
                                       f"starts worker processes from code that its workers run again; "
                                       f"{_GUARD_FIX}") from None
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
