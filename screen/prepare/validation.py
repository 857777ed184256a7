"""Row validation: every input row gets a status, a reason code and a specific message.

:func:`validate` runs the structure checks of :mod:`screen.prepare.checks` on each row, then
the row-level checks (role, repeated id), assigns the structure key and marks duplicate
structures.  One row's problem never stops the batch.

Examples
--------
>>> import pandas as pd
>>> out = validate(pd.DataFrame({"id": ["a", "b"], "smiles_input": ["OCC", "C1CC"]}))
>>> list(out.status), list(out.reason), out.smiles[0]
(['ok', 'rejected'], ['', 'unparsable'], 'CCO')
"""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from screen.chem import structure_key
from screen.io import cell_text as _text
from screen.isolation import MainGuardMissing
from screen.prepare.checks import REASON_CODES, _check_structure, _Checked, cell_control_problem, visible_controls
from screen.prepare.checks import snippet as _snippet
from screen.prepare.options import PrepareOptions
from screen.prepare.readers import INPUT_LINES, generated_id_names, input_line
from screen.prepare.readers import assign_missing_ids as _assign_missing_ids
from screen.prepare.shards import MANIFEST_COLUMNS

__all__ = ["validate"]

_ROLES: frozenset[str] = frozenset({"donor", "acceptor", "dye", ""})


def _join_notes(*parts: Iterable[str] | str) -> str:
    """Join note items with ``"; "``, skipping empty and repeated ones (order kept)."""
    items: list[str] = []
    for part in parts:
        if isinstance(part, str):
            part = part.split("; ") if part else []
        items.extend(p for p in part if p and p not in items)
    return "; ".join(items)


def validate(frame: pd.DataFrame, options: PrepareOptions = PrepareOptions()) -> pd.DataFrame:
    """Check every row, canonicalise accepted structures and mark duplicates.

    Parameters
    ----------
    frame : pandas.DataFrame
        Output of :func:`screen.prepare.read_candidates`, or any frame with an ``id`` column and a
        ``smiles_input`` (or ``smiles``) column; ``row``, ``name``, ``role``, ``note`` and
        ``read_error`` are optional.  Columns previously written by this function are
        recomputed, so validating a manifest again is safe.
    options : PrepareOptions
        Limits and allowed elements.

    Returns
    -------
    pandas.DataFrame
        A new frame, same rows in the same order, with the columns of
        :data:`MANIFEST_COLUMNS` followed by the passthrough columns: ``key`` (``''`` unless
        ``ok``), ``smiles`` (canonical isomeric SMILES, filled whenever the structure could be
        canonicalised, also for ``too_many_atoms`` and id/role rejections; not for a structure far over the size
        limit, refused before it is canonicalised: :func:`screen.prepare.checks.full_check_limit`), ``heavy_atoms``
        (nullable int), ``status`` (``'ok'`` or ``'rejected'``), ``reason`` (see the module
        docstring), ``error`` (specific message, ``''`` if ok), ``duplicate_of`` (id of the
        first ``ok`` row with the same key, ``''`` otherwise), ``note`` and
        ``representation`` (``'molecule'``, ``'polymer'`` for a repeat unit with two
        attachment points, ``''`` when the structure could not be classified).

    Raises
    ------
    ValueError
        If the frame has neither ``smiles_input`` nor ``smiles``, or no ``id`` column.
    """
    smiles_col = _smiles_column(frame)
    n = len(frame)
    try:
        rows = [int(r) for r in frame["row"]] if "row" in frame.columns else list(range(n))
    except (TypeError, ValueError):
        rows = list(range(n))

    def column(name: str) -> list[str]:
        return [_text(v) for v in frame[name]] if name in frame.columns else [""] * n

    where = _places(frame, rows)
    smiles_in = column(smiles_col)
    # ids without surrounding blanks (as roles): " dup " is the id dup, so a repeat of it is a duplicate_id
    # an empty id is named after the row's place in the file (line-12, record-3), as read_candidates names it
    ids, id_notes = _assign_missing_ids([ident.strip() for ident in column("id")], rows,
                                        generated_id_names(frame, rows))
    prior_notes = column("note")
    roles_raw = column("role")
    names = column("name")
    read_errors = column("read_error")
    out: dict[str, list] = {name: [] for name in _OUTPUT_COLUMNS}
    first_place_of_id: dict[str, tuple[str, str]] = {}
    first_id_of_key: dict[str, str] = {}
    for i in range(n):
        ident = ids[i]
        role = roles_raw[i].strip().lower()
        controls = cell_control_problem({"id": ident, "name": names[i], "role": roles_raw[i]})
        checked, reason, error = _check_row(
            smiles_in[i], read_errors[i], roles_raw[i], ident, first_place_of_id, options, where[i], controls
        )
        if reason:  # a rejected row's text shows a NUL, an ESC, ... by its symbol (␀, ␛): none reaches an output
            ids[i], names[i], smiles_in[i] = (visible_controls(t) for t in (ident, names[i], smiles_in[i]))
            roles_raw[i] = visible_controls(roles_raw[i])
        first_place_of_id.setdefault(ident, where[i])
        key = ""
        duplicate_of = ""
        if not reason:
            key = structure_key(checked.smiles)
            if key in first_id_of_key:
                duplicate_of = first_id_of_key[key]
            else:
                first_id_of_key[key] = ident
        out["key"].append(key)
        out["smiles"].append(checked.smiles)
        out["status"].append("rejected" if reason else "ok")
        out["reason"].append(reason)
        out["error"].append(error)
        out["duplicate_of"].append(duplicate_of)
        out["role"].append(role if role in _ROLES else roles_raw[i])
        out["heavy_atoms"].append(checked.heavy_atoms)
        out["representation"].append(checked.representation)
        out["note"].append(_join_notes(_join_notes(prior_notes[i], [id_notes[i]]), checked.notes))
    return _assemble(frame, smiles_col, rows, ids, smiles_in, names, out)


#: Columns :func:`validate` computes row by row.
_OUTPUT_COLUMNS = ("key", "smiles", "status", "reason", "error", "duplicate_of", "role",
                   "heavy_atoms", "note", "representation")


def _places(frame: pd.DataFrame, rows: list[int]) -> list[tuple[str, str]]:
    """Where each row is, in words a user can look up (long, and short for the row itself): the line of the
    candidate file when the frame was read by :func:`screen.prepare.read_candidates` (1-based, counting the header
    and blank lines), else its 0-based position (a frame built in code) and where that is in a plain file.

    Examples
    --------
    >>> _places(pd.DataFrame({"id": ["a"]}), [0])[0][0]
    'row 0 (0-based; line 2 of a CSV file with its header and no blank line, SD record 1)'
    >>> frame = pd.DataFrame({"id": ["a", "b"]})
    >>> frame.attrs[INPUT_LINES] = {"file": "c.sdf", "format": "sdf", "lines": [1, 40]}
    >>> _places(frame, [0, 1])[1]
    ('SD record 2 (line 40) of c.sdf', 'SD record 2, line 40')
    >>> frame.attrs[INPUT_LINES] = {"file": "c.csv", "format": "csv", "lines": [3, 6]}
    >>> _places(frame, [0, 1])[1]
    ('the row on line 6 of c.csv', 'line 6')
    """
    found = frame.attrs.get(INPUT_LINES) or {}
    name = found.get("file") or "the candidate file"
    out = []
    for row in rows:
        line = input_line(frame, row)
        if line is None:  # a frame built in code: where the row would be in a file
            out.append((f"row {row} (0-based; line {row + 2} of a CSV file with its header and no blank line, "
                        f"SD record {row + 1})", f"row {row}"))
        elif found.get("format") == "sdf":
            out.append((f"SD record {row + 1} (line {line}) of {name}", f"SD record {row + 1}, line {line}"))
        else:
            out.append((f"the row on line {line} of {name}", f"line {line}"))
    return out


def _smiles_column(frame: pd.DataFrame) -> str:
    """Name of the column holding the input SMILES; check that the frame has an id column."""
    if "smiles_input" in frame.columns:
        smiles_col = "smiles_input"
    elif "smiles" in frame.columns:
        smiles_col = "smiles"
    else:
        raise ValueError(
            f"validate(): the frame needs a 'smiles_input' or 'smiles' column; "
            f"columns found: {list(frame.columns)}"
        )
    if "id" not in frame.columns:
        raise ValueError(
            f"validate(): the frame needs an 'id' column; columns found: {list(frame.columns)}"
        )
    return smiles_col


def _check_row(
    smiles: str,
    read_error: str,
    role_raw: str,
    ident: str,
    first_place_of_id: dict[str, tuple[str, str]],
    options: PrepareOptions,
    here: tuple[str, str] = ("", ""),
    controls: str = "",
) -> tuple[_Checked, str, str]:
    """Check one row: read error, control characters in its id, name or role (``controls``:
    :func:`screen.prepare.checks.cell_control_problem`), structure, role, repeated id (``here``: where the row is,
    :func:`_places`).

    Returns the structure check result and the row's reason code and message (``''`` if ok).
    Any unexpected exception becomes ``internal_error``: the batch goes on.
    """
    checked = _Checked()
    reason = ""
    error = ""
    try:
        if read_error:
            code, _, message = read_error.partition(":")
            reason, error = (code, message) if code in REASON_CODES and message else (
                "unparsable",
                read_error,
            )
        elif controls:  # a NUL cuts an id short in C programs, a line break splits an SD title (a security audit)
            reason, error = "malformed_row", f"{here[1]}: {controls}" if here[1] else controls
        else:
            checked = _check_structure(smiles, options)
            reason, error = checked.reason, checked.error
        if not reason and role_raw.strip().lower() not in _ROLES:
            reason = "bad_role"
            error = f"role {_snippet(role_raw)} is not one of 'donor', 'acceptor', 'dye' or empty"
        if not reason and ident in first_place_of_id:
            # before: "row 0 (0-based, as in the 'row' column of levels.csv: line 2 ...)", a column levels.csv does
            # not have and a line that missed the blank lines (an overnight operator's report)
            reason = "duplicate_id"
            this = f" ({here[1]})" if here[1] else ""
            error = (
                f"id {_snippet(ident)} is already used by {first_place_of_id[ident][0]}; ids must be unique, so "
                f"this row{this} is not screened (the first one keeps the id in levels.csv); give it another id"
            )
    except MainGuardMissing:  # a script without its main guard: the whole call stops with that one message
        raise
    except Exception as exc:  # the batch goes on whatever happens to one row
        reason = "internal_error"
        error = f"unexpected {type(exc).__name__} while checking this row: {exc}"
    return checked, reason, error


def _assemble(
    frame: pd.DataFrame,
    smiles_col: str,
    rows: list[int],
    ids: list[str],
    smiles_in: list[str],
    names: list[str],
    out: dict[str, list],
) -> pd.DataFrame:
    """Build the manifest frame: :data:`MANIFEST_COLUMNS`, then the passthrough columns."""
    data = {"row": pd.Series(rows, dtype="int64"), "id": pd.Series(ids, dtype=object),
            "smiles_input": pd.Series(smiles_in, dtype=object),
            "name": pd.Series(names, dtype=object)}
    for name, values in out.items():
        data[name] = pd.Series(values, dtype="Int64" if name == "heavy_atoms" else object)
    result = pd.DataFrame({name: data[name] for name in MANIFEST_COLUMNS})
    result.attrs.update(frame.attrs)  # where the rows are in the file: validating the output again says the same
    own = set(MANIFEST_COLUMNS) | {"read_error", smiles_col}
    for col in frame.columns:
        if col not in own:
            result[col] = [_text(v) for v in frame[col]]
            result[col] = result[col].astype(object)
    return result
