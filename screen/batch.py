"""The per-molecule loop of the compute stages: journal, isolation, progress.

Both expensive stages (:mod:`screen.structures`, :mod:`screen.electronic`)
work through a shard one molecule at a time.  This module is the one home of
that loop: finished molecules are appended to a :class:`screen.io.Journal`
(so a killed job resumes where it stopped), each molecule can run in an
:class:`screen.isolation.IsolatedWorker` (so a native crash costs one
molecule), and progress lines go to the job's log.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterable, Iterator

from screen.io import Journal, Progress
from screen.isolation import IsolatedWorker

__all__ = ["molecule_caller", "run_journalled", "journalled", "report_store_hits", "STORE_NOT_USABLE",
           "STORE_NOT_WRITTEN", "RESUMED_FROM_JOURNAL"]

#: the phrases of :func:`report_store_hits`' log line that :func:`screen.launch.unstored_results` looks for (one
#: source: a rewording here is a rewording there): ``; <phrase>: <why>`` and ``; <n> <resumed phrase> ...``
STORE_NOT_USABLE = "the results store was not usable"
STORE_NOT_WRITTEN = "new results were not stored"
RESUMED_FROM_JOURNAL = "more resumed from the journal"


@contextlib.contextmanager
def molecule_caller(job: Callable, local: Callable | None, timeout_s: float | None = None) -> Iterator[Callable]:
    """The function that computes one molecule: ``local`` in this process, else ``job`` in a child process.

    Parameters
    ----------
    job : callable
        Module-level (picklable) function run in an isolated child process.
    local : callable or None
        Same signature as ``job``, run in this process; ``None`` selects
        isolation.
    timeout_s : float, optional
        Per-molecule time limit of the isolated child [s].

    Examples
    --------
    >>> import math
    >>> with molecule_caller(math.sqrt, None) as call:
    ...     call(9.0)
    3.0
    >>> with molecule_caller(math.sqrt, lambda x: -x) as call:
    ...     call(9.0)
    -9.0
    """
    if local is not None:
        yield local
        return
    worker = IsolatedWorker(job, timeout_s=timeout_s)
    try:
        yield worker
    finally:
        worker.close()


def run_journalled(items: Iterable, key: Callable, compute: Callable[[object], dict], journal: Journal,
                   progress: Progress, cache=None) -> dict[str, dict]:
    """Compute every item whose key the journal does not hold yet; return all records by key.

    Parameters
    ----------
    items : iterable
        Work items in shard order.
    key : callable
        ``key(item)`` → the item's structure key.
    compute : callable
        ``compute(item)`` → the record to journal (a dict with ``"key"``); it
        must turn a per-molecule failure into a record, not raise.
    journal : Journal
        Records of finished items (read first, appended after each item).
    progress : Progress
        Reports ``done / to do`` after each item.
    cache : screen.store.StoreCache, optional
        The results store: asked before computing an item (a stored record is
        journalled instead); a freshly computed record goes to it after its
        journal line, so a killed job loses nothing (on resume, the journal's last
        record is stored if the store lacks it: the job may have died in between).

    Returns
    -------
    dict
        Records by key: earlier ones from the journal and the new ones.

    Notes
    -----
    The job's log ends with how many molecules were resumed from the journal (an interrupted attempt finished
    them), came from the results store and were computed (:func:`report_store_hits`).

    Examples
    --------
    >>> import io, tempfile, pathlib
    >>> j = Journal(pathlib.Path(tempfile.mkdtemp()) / "j.jsonl")
    >>> p = Progress("demo", stream=io.StringIO())
    >>> done = run_journalled([1, 2], str, lambda i: {"key": str(i), "sq": i * i}, j, p)
    >>> done["2"]["sq"], sorted(j.load())
    (4, ['1', '2'])
    """
    done = journal.load()
    items = list(items)
    if cache is not None and done:  # a kill after the last journal line, before its store write
        last = next(reversed(done))
        item = next((it for it in items if key(it) == last), None)
        if item is not None:
            cache.keep(item, done[last])
    todo = [item for item in items if key(item) not in done]
    for i, item in enumerate(todo, 1):
        rec = journalled(item, key, compute, journal, done, cache)
        progress.report(i, len(todo), rec["key"])
    resumed = len(items) - len(todo)
    if todo or resumed:
        report_store_hits(progress, cache, len(todo), resumed=resumed)
    return done


def journalled(item, key: Callable, compute: Callable[[object], dict], journal: Journal, done: dict,
               cache=None) -> dict:
    """The record of one item: from ``done`` (the journal), else from the results store, else computed.

    A record not in ``done`` is appended to ``journal`` and added to ``done``; a
    freshly computed one goes to ``cache`` after its journal line, so a killed job
    loses nothing (see :func:`run_journalled` for the arguments).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> j = Journal(pathlib.Path(tempfile.mkdtemp()) / "j.jsonl")
    >>> done = {}
    >>> journalled(3, str, lambda i: {"key": str(i), "sq": i * i}, j, done)["sq"], list(j.load())
    (9, ['3'])
    >>> journalled(3, str, lambda i: {"key": str(i), "sq": -1}, j, done)["sq"]  # journalled: not computed again
    9
    """
    if key(item) in done:
        return done[key(item)]
    rec = cache.lookup(item) if cache is not None else None
    fresh = rec is None
    if fresh:
        rec = compute(item)
    journal.append(rec)
    if fresh and cache is not None:
        cache.remember(item, rec)
    done[rec["key"]] = rec
    return rec


def report_store_hits(progress: Progress, cache, n_items: int, what: str = "", resumed: int = 0) -> None:
    """Log line ``<label>: <hits> of <n> molecules from the results store, <n - hits> computed[; <r> resumed from
    the journal ...][ (<what>)]`` for the ``n_items`` molecules a job had to do (nothing without a store, unless
    ``resumed``).

    A store the job could not read says so instead (``<n> molecules computed; the results store was not usable:
    <why>``, the cache's ``read_problem``), and one it could not write adds ``; new results were not stored: <why>``
    (``write_problem``).

    ``resumed``: molecules of the shard an earlier, interrupted attempt finished (read from the journal, not
    counted in ``n_items``): an overnight operator could not tell from the logs what the night's interruptions
    cost.

    Examples
    --------
    >>> import io
    >>> class Cache:
    ...     hits = 2
    >>> p = Progress("electronic shard-000", stream=io.StringIO())
    >>> report_store_hits(p, Cache(), 5, "electronic")
    >>> report_store_hits(p, None, 3, resumed=7)
    >>> print(p.stream.getvalue(), end="")
    electronic shard-000: 2 of 5 molecules from the results store, 3 computed (electronic)
    electronic shard-000: 3 molecules computed; 7 more resumed from the journal (an interrupted attempt finished them)
    """
    if cache is None and not resumed:
        return
    suffix = f" ({what})" if what else ""
    molecules = f"{n_items} molecule{'' if n_items == 1 else 's'}"
    read, write = getattr(cache, "read_problem", None), getattr(cache, "write_problem", None)
    if cache is None:
        counts = f"{molecules} computed"
    elif read:  # a concurrency audit: "0 of 3 molecules from the results store" read as if the store had been asked
        counts = (f"{cache.hits} of {molecules} from the results store, then {n_items - cache.hits} computed"
                  if cache.hits else f"{molecules} computed") + f"; {STORE_NOT_USABLE}: {read}"
    else:
        counts = f"{cache.hits} of {molecules} from the results store, {n_items - cache.hits} computed"
        if write:
            counts += f"; {STORE_NOT_WRITTEN}: {write}"
    if resumed:
        counts += f"; {resumed} {RESUMED_FROM_JOURNAL} (an interrupted attempt finished them)"
    print(f"{progress.label}: {counts}{suffix}", file=progress.stream, flush=True)
