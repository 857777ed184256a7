"""Writing the report files: ``report.html`` and ``ranking.safe.csv``, atomically and readable by all."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from screen.io import atomic_path
from screen.report.export import safe_csv_bytes
from screen.report.page import render_report

__all__ = ["write_report"]

#: Permissions of the written files (the temporary files of atomic writes are 0600).
_FILE_MODE = 0o644


def write_report(ranking: pd.DataFrame, levels: pd.DataFrame, partner: dict, meta: dict,
                 out_dir: Path, *, ranking_csv: str | None = None) -> Path:
    """Write ``report.html`` and ``ranking.safe.csv`` for one ranking.

    Parameters
    ----------
    ranking : pandas.DataFrame
        Best first, columns of the ranking contract (``rank, id, smiles, role,
        homo_ev, lumo_ev, gap_opt_ev, partner, delta_lumo_ev, delta_homo_ev,
        voc_v, jsc_ma_cm2, ff, pce_pct, pce_sigma_pct, p_above_target, passes,
        flags``), optionally ``name`` and σ columns (filled from ``levels``
        by id when absent) and a boolean ``shortlist``.
    levels : pandas.DataFrame
        The full levels table (every input row, ``status`` and ``error``);
        rows that are not ok, or not ranked, appear under "Not ranked"
        (ranked pairs that are not viable under "Not viable").
    partner : dict
        Partner levels: ``id, name, role, homo_ev, lumo_ev, gap_opt_ev,
        scale, source`` and σ keys; an empty dict falls back to
        ``meta["partner"]``.
    meta : dict
        ``device`` (model parameters), ``rank`` (target, shortlist size,
        sort key, gap window), ``levels_meta`` (version, protocol id,
        protocol, models, calibration statistics), ``counts``, ``outputs``
        and ``shortlist_note`` (a ``shortlist`` output of None: the footer
        gives the note instead of a link) and, for reproducible output,
        ``created`` (the date line).  Missing keys are
        shown as "not recorded".  :func:`screen.rank_io.run_rank` passes the
        dict it writes to ``ranking.meta.json``.
    out_dir : path-like
        Folder for the two files (created if missing).
    ranking_csv : str, optional
        ``ranking.to_csv(index=False, lineterminator="\\n")`` when the caller
        has made it (:func:`screen.rank_io.run_rank` writes it as
        ``ranking.csv``): ``ranking.safe.csv`` is that text when no cell needs
        neutralising (:func:`screen.report.export.safe_csv_text`).

    Returns
    -------
    pathlib.Path
        Path of ``report.html``.

    Notes
    -----
    Both files are written atomically (temporary file + :func:`os.replace`)
    and made readable for everyone (mode 0644): reports are meant to be shared.
    The shortlist is the ``shortlist`` column when present, else the first
    ``meta["rank"]["shortlist_size"]`` rows (default 10) that pass every
    check.  Structure drawings are made for the shortlist only, which keeps
    the page near 1 MB for 1000 ranked rows.

    Examples
    --------
    >>> import tempfile, pandas as pd
    >>> from pathlib import Path
    >>> r = pd.DataFrame({"rank": [1], "id": ["demo"], "smiles": ["c1ccsc1"], "role": ["donor"],
    ...                   "homo_ev": [-5.4], "lumo_ev": [-3.9], "gap_opt_ev": [1.5],
    ...                   "delta_lumo_ev": [0.4], "pce_pct": [9.8], "passes": [True], "flags": [""]})
    >>> out = write_report(r, pd.DataFrame(), {"id": "ref", "lumo_ev": -4.3}, {"created": "x"},
    ...                    Path(tempfile.mkdtemp()))
    >>> out.name, (out.parent / "ranking.safe.csv").exists()
    ('report.html', True)
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    page = render_report(ranking, levels, partner, meta)
    target = out_dir / "report.html"
    with atomic_path(target) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(page)
        os.chmod(tmp, _FILE_MODE)
    with atomic_path(out_dir / "ranking.safe.csv") as tmp:
        source = ranking if ranking is not None else pd.DataFrame()
        tmp.write_bytes(safe_csv_bytes(source, ranking_csv))  # UTF-8 with a BOM: what a spreadsheet needs
        os.chmod(tmp, _FILE_MODE)
    return target
