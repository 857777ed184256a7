"""Pre-flight checks: everything that can be refused before the workflow starts.

The ``dascreen`` command calls these before it starts Snakemake, so that a bad
input costs one message and exit code 2 (``docs/contracts.md`` §3 and §7)
instead of a failed job and a traceback: a missing or empty candidate file,
missing columns, an unknown partner ("did you mean …"), a ``--set`` key or
value the schema does not allow (the message blames the ``--set`` and lists
close field names), an output folder that would mix two runs, a partner on
another energy scale than the run's levels (:func:`check_partner_scales`) and
settings that no calibration serves, which would start hours of reference
computation unless the run opted in with ``calibration.refit=always``
(:func:`check_calibration`; the message names each setting that differs from
the shipped calibration).

The schema walk here (:func:`schema_fields`, :func:`allowed_text`,
:func:`unit_of`) also feeds ``dascreen config``.

Examples
--------
>>> check_sets(["device.eqe=0.7"])
{'device': {'eqe': 0.7}}
>>> check_sets(["device.eqee=0.7"])
Traceback (most recent call last):
...
screen.errors.ConfigError: --set device.eqee=0.7: no field device.eqee; did you mean device.eqe? (`dascreen config` lists every field)
"""

from __future__ import annotations

import argparse
import os
import re
import stat
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import yaml

from screen.config import calibration_set_args, load_yaml, nearest_existing, read_problem
from screen.config import setting_text as _show
from screen.config import flat_settings as _flat
from screen.errors import ConfigError, InputError

__all__ = ["SchemaField", "schema_fields", "allowed_text", "unit_of", "check_sets", "check_rank_sets", "check_rank_config",
           "check_candidates",
           "check_out_folder", "check_partners", "check_partner_scales", "check_out", "config_text",
           "check_profile", "check_run_partners", "make_out_folder",
           "CalibrationDifference", "calibration_differences", "calibration_text", "check_calibration", "fitted_in",
           "reference_count", "check_reference", "GivenOnce"]


class GivenOnce(argparse.Action):
    """An option that may be given once: the same option again with another value is refused (exit code 2).

    ``--target-pce 8 --target-pce 12`` ranked with 12 without a word, while ``--target-pce 8 --set
    rank.target_pce_pct=12`` was refused as a conflict (a careless user's audit). The same value twice is
    accepted. For options whose default is None (the first value given replaces it).

    Examples
    --------
    >>> p = argparse.ArgumentParser(prog="x", exit_on_error=False)
    >>> _ = p.add_argument("--role", action=GivenOnce, default=None)
    >>> p.parse_args(["--role", "donor", "--role", "donor"]).role
    'donor'
    >>> try:
    ...     p.parse_args(["--role", "donor", "--role", "acceptor"])
    ... except argparse.ArgumentError as exc:
    ...     print(exc)
    argument --role: given twice, as 'donor' and 'acceptor'; give it once
    """

    def __call__(self, parser, namespace, values, option_string=None):
        before = getattr(namespace, self.dest, None)
        if before is not None and before != values:
            raise argparse.ArgumentError(self, f"given twice, as {_given_text(before)} and {_given_text(values)}; "
                                               "give it once")
        setattr(namespace, self.dest, values)


def _given_text(value) -> str:
    """An option's value as the user typed it, near enough (``8.0`` → ``8``)."""
    return f"{value:g}" if isinstance(value, float) else repr(value)


def check_reference(folder, given: str | None, from_raw: bool = False) -> None:
    """Refuse a reference folder that is missing or lacks reference files, before anything is computed.

    A missing or empty ``--reference`` started the calibration workflow, which stopped with exit code 1 and the
    reason only in its log (a careless user's audit). The workflow reads every file of
    :data:`screen.calibration.reference.FILES`; a refit from raw values (``from_raw``) only the required sets.

    Parameters
    ----------
    folder : path-like
        ``calibration.reference`` of the configuration.
    given : str or None
        ``--reference`` as the user wrote it (None: the folder came from the configuration).

    Raises
    ------
    ConfigError
        Naming the folder, the missing files and the fix (exit code 2).
    """
    from screen.calibration.reference import FILES, REQUIRED_SETS

    name = f"--reference {given}" if given is not None else f"calibration.reference {folder}"
    about = ("a reference folder holds " + ", ".join(FILES.values()) + " (a copy of models/reference with your "
             "own values is expected)")
    path = Path(str(folder))
    if not path.exists():
        raise ConfigError(f"{name}: no such folder; {about}")
    if not path.is_dir():
        raise ConfigError(f"{name} is a file, not a folder; {about}")
    needed = list(FILES.values()) if not from_raw else [FILES[k] for k in REQUIRED_SETS]
    missing = [f for f in needed if not (path / f).is_file()]
    if len(missing) == len(needed):
        raise ConfigError(f"{name} holds none of the reference files; {about}")
    if missing:
        raise ConfigError(f"{name} lacks {', '.join(missing)}; {about}")


# --------------------------------------------------------------------------- the schema, field by field

@dataclass(frozen=True)
class SchemaField:
    """One leaf field of the configuration schema."""

    path: str
    schema: dict
    section: str

    @property
    def description(self) -> str:
        return " ".join(str(self.schema.get("description", "")).split())

    @property
    def default(self):
        return self.schema.get("default")


def _schema() -> dict:
    from screen.schema import SCHEMA_PATH

    return yaml.safe_load(SCHEMA_PATH.read_text(encoding="utf-8"))


def _node(schema: dict, parts: list[str]) -> dict | None:
    node = schema
    for part in parts:
        props = node.get("properties") if isinstance(node, dict) else None
        if not props or part not in props:
            return None
        node = props[part]
    return node


def schema_fields(schema: dict | None = None) -> list[SchemaField]:
    """Every leaf field of the schema, in schema order (``section.key`` paths).

    Examples
    --------
    >>> paths = [f.path for f in schema_fields()]
    >>> "device.eqe" in paths and "store.path" in paths and "candidates" in paths
    True
    """
    schema = schema or _schema()
    out: list[SchemaField] = []

    def walk(node: dict, prefix: str, section: str) -> None:
        for name, sub in node.get("properties", {}).items():
            path = f"{prefix}.{name}" if prefix else name
            if sub.get("type") == "object" and "properties" in sub:
                walk(sub, path, section or name)
            else:
                out.append(SchemaField(path, sub, section))

    walk(schema, "", "")
    return out


_SUFFIX_UNITS = (("_kcal_mol", "kcal/mol"), ("_ev_a", "eV/Å"), ("_ma_cm2", "mA/cm²"), ("_ev", "eV"), ("_eh", "Hartree"),
                 ("_pct", "%"), ("_nm", "nm"), ("_k", "K"), ("_s", "s"), ("_v", "V"), ("_a", "Å"))


def unit_of(field: SchemaField) -> str:
    """The unit of a field: the first ``[…]`` of its description, else from its name's suffix, else ``—``.

    Examples
    --------
    >>> f = {x.path: x for x in schema_fields()}
    >>> unit_of(f["rank.gap_min_ev"]), unit_of(f["structures.seed"])
    ('eV', '—')
    """
    found = re.search(r"\[([^\]]+)\]", field.description)
    if found:
        return found.group(1)
    name = field.path.rsplit(".", 1)[-1]
    for suffix, unit in _SUFFIX_UNITS:
        if name.endswith(suffix):
            return unit
    return "—"


def _bounds(schema: dict) -> str:
    parts = []
    for key, sign in (("minimum", ">="), ("exclusiveMinimum", ">"), ("maximum", "<="), ("exclusiveMaximum", "<")):
        if key in schema:
            parts.append(f"{sign} {schema[key]}")
    return " and ".join(parts)


def allowed_text(schema: dict) -> str:
    """The allowed values of a field in words.

    Examples
    --------
    >>> allowed_text({"enum": ["ff", "xtb"]})
    'one of ff, xtb'
    >>> allowed_text({"type": ["number", "null"], "exclusiveMinimum": 0, "maximum": 1})
    'number > 0 and <= 1, or null'
    >>> allowed_text({"enum": [False], "description": "must stay false: why"})
    'False only (must stay false: why)'
    """
    if "enum" in schema and len(schema["enum"]) == 1 and schema.get("description"):
        return f"{schema['enum'][0]} only ({schema['description']})"  # a fixed setting says why it is fixed
    if "enum" in schema:
        return "one of " + ", ".join("null" if v is None else str(v) for v in schema["enum"])
    types = schema.get("type", [])
    types = [types] if isinstance(types, str) else list(types)
    words = {"integer": "integer", "number": "number", "string": "text", "boolean": "true or false",
             "array": "list", "object": "mapping"}
    main = [t for t in types if t != "null"]
    text = " or ".join(words.get(t, t) for t in main) or "any value"
    if "array" in main and isinstance(schema.get("items"), dict):
        item = schema["items"]
        text = f"list of {allowed_text(item)}" + (f" matching {item['pattern']}" if "pattern" in item else "")
    bounds = _bounds(schema)
    if bounds:
        text += " " + bounds
    if "null" in types:
        text += ", or null"
    return text




def config_text(width: int = 100, cli_defaults: dict | None = None) -> str:
    """``dascreen config``: every field with its description, unit, default and allowed values.

    Parameters
    ----------
    width : int
        Line width of the descriptions.
    cli_defaults : dict, optional
        ``{field: text}`` for fields the ``dascreen`` command sets itself (``out`` from ``--out``):
        shown as the default, the schema's default named as the one of a snakemake run started
        without the command.

    Examples
    --------
    >>> text = config_text()
    >>> "device.eqe" in text and "default: null" in text and "allowed:" in text
    True
    >>> "default: ./results (--out)" in config_text(cli_defaults={"out": "./results (--out)"})
    True
    """
    import textwrap

    schema = _schema()
    lines = ["dascreen configuration: every field with its default, unit and allowed values.",
             "Change one with --set SECTION.KEY=VALUE or a --config YAML file (`dascreen config --yaml` prints",
             "a complete file with the defaults).", ""]
    current = None
    for field in schema_fields(schema):
        if field.section != current:
            current = field.section
            if field.section:
                about = " ".join(str(schema["properties"][field.section].get("description", "")).split())
                lines += ["", f"[{field.section}]" + (f"  {about}" if about else "")]
        lines.append(f"  {field.path}")
        lines += textwrap.wrap(field.description or "(no description)", width - 6, initial_indent="      ",
                               subsequent_indent="      ", break_on_hyphens=False)
        default = _show(field.default)
        if field.path in (cli_defaults or {}):
            default = f"{cli_defaults[field.path]}; snakemake without the dascreen command: {default}"
        lines.append(f"      default: {default} | unit: {unit_of(field)} | allowed: {allowed_text(field.schema)}")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- --set

def _close_fields(path: str, fields: list[str]) -> list[str]:
    from screen.partners import suggest

    hits = suggest(path, fields, n=3, cutoff=0.85) or suggest(path, fields, n=3, cutoff=0.6)
    leaf = path.rsplit(".", 1)[-1]
    hits += [f for f in fields if f.rsplit(".", 1)[-1] == leaf and f not in hits]
    return hits[:3]


def check_sets(items) -> dict:
    """Check ``--set SECTION.KEY=VALUE`` items against the schema; return them as a nested mapping.

    Parameters
    ----------
    items : list of str
        The ``--set`` values (values parsed as YAML).

    Raises
    ------
    ConfigError
        Naming the ``--set`` item: no ``=``, an unknown field (with close field
        names) or a value the field does not allow (with the allowed values).
    """
    import jsonschema

    from screen.schema import non_finite, non_finite_text, read_as_written

    schema = _schema()
    fields = [f.path for f in schema_fields(schema)]
    out: dict = {}
    given: dict = {}
    for item in items or []:
        if "=" not in item:
            raise ConfigError(f"--set {item!r}: expected SECTION.KEY=VALUE, e.g. --set device.eqe=0.7")
        path, raw = (part.strip() for part in item.split("=", 1))
        node = _node(schema, path.split(".")) if path else None
        if node is None:
            close = _close_fields(path, fields)
            hint = f"; did you mean {' or '.join(close)}?" if close else ""
            raise ConfigError(f"--set {item}: no field {path or '(empty)'}{hint} (`dascreen config` lists every field)")
        try:
            value = load_yaml(raw) if raw else None
        except yaml.YAMLError as exc:
            raise ConfigError(f"--set {item}: the value is not valid YAML ({exc})") from None
        if isinstance(value, str):  # 1e3 and ~/x as the user meant them (screen.schema.read_as_written)
            holder = wrapped = {}
            for part in path.split(".")[:-1]:
                holder = holder.setdefault(part, {})
            holder[path.split(".")[-1]] = value
            read_as_written(wrapped, schema)
            holder = wrapped
            for part in path.split("."):
                holder = holder[part]
            value = holder
        bad = non_finite(value, path)
        if bad:  # the schema's bounds let NaN through (--set rank.target_pce_pct=.nan ranked with "target nan %"); and
            # said first, so that .inf is "not a finite number", not "greater than the maximum"
            raise ConfigError(f"--set {item}: {non_finite_text(bad[0][1])}; allowed for {path}: {allowed_text(node)}")
        errors = list(jsonschema.Draft202012Validator(node).iter_errors(value))
        if errors:
            raise ConfigError(f"--set {item}: {errors[0].message}; allowed for {path}: {allowed_text(node)}")
        target = out
        parts = path.split(".")
        for part in parts[:-1]:
            target = target.setdefault(part, {})
        target[parts[-1]] = value
        given[path] = item
    _check_set_combinations(out, given)
    return out


def _check_set_combinations(sets: dict, given: dict) -> None:
    """Refuse ``--set`` items that each pass the schema but not together (``given``: the item of each path).

    Today: a HOMO threshold with the donor-only model (:func:`screen.device.homo_threshold_problem`); a config
    file's value is refused by the schema's rule on the ``device`` section."""
    from screen.device import homo_threshold_problem

    device = sets.get("device") or {}
    problem = homo_threshold_problem(device.get("absorber"), device.get("min_delta_homo_ev"))
    if problem:
        items = [given[p] for p in ("device.min_delta_homo_ev", "device.absorber") if p in given]
        raise ConfigError(f"--set {', '.join(items)}: {problem}")


# --------------------------------------------------------------------------- inputs

#: the config sections a re-ranking of computed levels applies, per command; every other section sets how levels
#: are computed (or belongs to the other mode) and would be ignored
RANK_SECTIONS = {"rank": ("device", "rank", "partner", "store", "strict"), "dyecell": ("dyecell", "store", "strict")}


def check_rank_sets(items, command: str) -> None:
    """Refuse ``--set`` items that a re-ranking of computed levels cannot apply.

    ``dascreen rank`` (and ``dascreen dyecell --levels``) rank levels that are already computed: a
    setting of how levels are computed (``structures``, ``electronic``, ``levels.scale``, …) or of
    the other mode would be silently ignored, and the user would believe it was applied.

    Examples
    --------
    >>> check_rank_sets(["device.eqe=0.7", "rank.seed=3"], "rank")
    >>> check_rank_sets(["structures.geometry=xtb"], "rank")
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: --set structures.geometry=xtb: `dascreen rank` ranks levels that are already computed and cannot apply it (structures.* sets how levels are computed); compute new levels with `dascreen run CANDIDATES --out NEW_FOLDER --set structures.geometry=xtb` and rank those; here --set takes device.*, rank.*, partner, store.*, strict
    """
    allowed = RANK_SECTIONS[command]
    # an unknown field or value first: its message names the near field (a typo is no section)
    sections = sorted(set(check_sets(items)) - set(allowed))
    if not sections:
        return
    ignored = [item for item in items if item.split("=", 1)[0].strip().split(".")[0] in sections]
    what = ", ".join(f"{s}.*" for s in sections)
    other = "dyecell" if command == "rank" else "rank"
    if set(sections) <= set(RANK_SECTIONS[other]) - {"store", "strict"}:  # the other mode's own settings
        why, fix = f"{what} belongs to `dascreen {other}`", f"use `dascreen {other}` for it"
    else:
        why = f"{what} sets how levels are computed"
        fix = (f"compute new levels with `dascreen {'run' if command == 'rank' else 'dyecell'} CANDIDATES --out NEW_FOLDER "
               f"{' '.join('--set ' + i for i in ignored)}` and rank those")
    takes = ", ".join(f"{s}.*" if s not in ("partner", "strict") else s for s in allowed)
    raise ConfigError(f"--set {', '.join(ignored)}: `dascreen {command}` ranks levels that are already computed and "
                      f"cannot apply it ({why}); {fix}; here --set takes {takes}")


def check_rank_config(path, levels_path, command: str, implied: bool = False) -> None:
    """Refuse a ``--config`` file whose settings of how levels are computed differ from the levels'.

    A re-ranking cannot recompute levels, so a config file whose ``structures`` or
    ``electronic`` sections give another protocol than the one recorded beside the
    levels (``LEVELS.meta.json``), or whose ``levels.scale`` differs from theirs,
    would be silently ignored — the same case :func:`check_rank_sets` refuses for
    ``--set``. A run's own ``config.yaml`` always agrees with its levels; a levels
    file without a sidecar is not checked.

    ``implied``: ``path`` is the ``config.yaml`` of the ``--out`` folder's run, used because no ``--config`` was
    given; the message then says that the levels and the folder's run are of different protocols (before, it
    blamed a ``--config`` the user never gave).

    Raises
    ------
    ConfigError
        The message names the file, what differs and what to do.
    """
    if path is None:
        return
    from screen.config import Config, read_config_file

    from screen.io import read_json

    side = Path(f"{levels_path}.meta.json")
    try:
        meta = read_json(side) if side.is_file() else None
    except (OSError, ValueError):
        meta = None
    if not isinstance(meta, dict):
        return
    raw = read_config_file(path)
    differs = []
    sections = [s for s in ("structures", "electronic") if raw.get(s)]
    ran = meta.get("protocol_id")
    if sections and ran:
        mine = Config.load(path).protocol_id
        if mine != ran:
            differs.append(f"its {' and '.join(sections)} settings give protocol {mine}, the levels were computed "
                           f"with {ran}")
    scale = (raw.get("levels") or {}).get("scale") if isinstance(raw.get("levels"), dict) else None
    if scale and meta.get("scale") and scale != meta["scale"]:
        differs.append(f"its levels.scale is {scale}, the levels are on the {meta['scale']} scale")
    if differs and implied:
        folder = Path(path).parent
        own = Path(levels_path).resolve().parent / "config.yaml"
        match = f" (e.g. --config {own})" if own.is_file() and own != Path(path).resolve() else ""
        what = []
        if sections and ran and mine != ran:
            what.append(f"the levels in {levels_path} are of protocol {ran}, the run in {folder} is of protocol {mine}")
        if scale and meta.get("scale") and scale != meta["scale"]:
            what.append(f"the levels are on the {meta['scale']} scale, the run in {folder} on the {scale} scale")
        raise ConfigError(f"--out {folder}: {'; '.join(what)} (its config.yaml, used since no --config was given); "
                          f"`dascreen {command}` cannot recompute levels, so rank them into another --out, or give a "
                          f"--config of their protocol{match}")
    if differs:
        compute = "run" if command == "rank" else "dyecell"
        raise ConfigError(f"--config {path}: `dascreen {command}` ranks levels that are already computed and cannot "
                          f"apply how this file computes levels ({'; '.join(differs)}); rank with the run's own "
                          f"config.yaml or remove those settings from the file, or compute new levels with "
                          f"`dascreen {compute} CANDIDATES --out NEW_FOLDER --config {path}`")


_SDF = (".sdf", ".sd", ".sdf.gz", ".sd.gz")


def _near_files(path: Path) -> list[str]:
    from screen.partners import suggest

    folder = path.parent if path.parent.is_dir() else Path(".")
    names = [p.name for p in folder.iterdir() if p.is_file()] if folder.is_dir() else []
    return [str(folder / n) for n in suggest(path.name, names, n=2)]


#: how alike a missing candidate file's name (without extensions) and a file's must be to be suggested
#: (:class:`difflib.SequenceMatcher` ratio)
NEAR_NAME_RATIO = 0.6


def _near_candidate_files(path: Path, n: int = 2) -> list[str]:
    """Files next to a missing candidate file whose names, without their extensions, are close to its name.

    Whole names were compared before, so the common ``.csv`` made ``nosuch.csv`` suggest ``batch.csv or
    cv_bad.csv`` (an overnight operator's report); a typo of the name itself, or another extension, still finds
    the file.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> for name in ("batch.csv", "cv_bad.csv", "half1.csv"):
    ...     _ = (folder / name).write_text("id,smiles\\n")
    >>> [Path(p).name for p in _near_candidate_files(folder / "bacth.csv")]
    ['batch.csv']
    >>> [Path(p).name for p in _near_candidate_files(folder / "batch.smi")]
    ['batch.csv']
    >>> _near_candidate_files(folder / "nosuch.csv")
    []
    """
    import difflib

    def stem(name: str) -> str:
        return name.lower().split(".")[0] or name.lower()

    folder = path.parent if path.parent.is_dir() else Path(".")
    try:
        names = [p.name for p in folder.iterdir() if p.is_file()] if folder.is_dir() else []
    except OSError:
        return []
    want = stem(path.name)
    scored = []
    for name in names:
        close = difflib.SequenceMatcher(None, want, stem(name)).ratio()
        if close >= NEAR_NAME_RATIO:
            whole = difflib.SequenceMatcher(None, path.name.lower(), name.lower()).ratio()
            scored.append((-close, -whole, name))
    return [str(folder / name) for *_, name in sorted(scored)[:n]]


def check_candidates(path) -> int:
    """Check a candidate file before a run; return its number of records.

    Raises
    ------
    InputError
        Missing file (with close file names), a folder, a pipe or device, an empty file or one
        without records, an unknown file type, a CSV without a ``smiles``
        column, text that is not UTF-8.
    """
    path = Path(path)
    if not path.exists():
        near = _near_candidate_files(path)
        hint = f"; did you mean {' or '.join(near)}?" if near else ""
        raise InputError(f"candidates file {str(path)!r} does not exist{hint}")
    if path.is_dir():
        raise InputError(f"candidates {str(path)!r} is a folder; give a .csv, .smi or .sdf file")
    info = path.stat()
    if not stat.S_ISREG(info.st_mode):  # a pipe (<(cat x.csv), /dev/stdin) has size 0 and is read once only: the
        # run reads the file more than once (an audit: "is empty" for a process substitution that was not)
        raise InputError(f"candidates file {path} is not a regular file (a pipe or device): save it to a file "
                         "first, e.g. `cat ... > candidates.csv`, and give that file")
    if info.st_size == 0:
        raise InputError(f"candidates file {path} is empty: nothing to screen")
    if path.name.lower().endswith(_SDF):
        return _check_sdf(path)
    from screen.prepare.readers import read_candidates

    frame = read_candidates(path)  # file-level problems (type, encoding, no smiles column) raise InputError
    if len(frame) == 0:
        what = "a header but no rows" if path.suffix.lower() == ".csv" else "no molecules"
        raise InputError(f"candidates file {path} holds {what}: nothing to screen")
    return len(frame)


def _check_sdf(path: Path) -> int:
    import gzip

    opener = gzip.open if path.name.lower().endswith(".gz") else open
    try:
        with opener(path, "rt", encoding="utf-8") as fh:
            records = sum(1 for line in fh if line.startswith("M  END"))
    except UnicodeDecodeError:  # the line of the first byte that is not UTF-8, not its offset in the data
        from screen.prepare.readers import not_utf8_error

        try:
            raw = gzip.decompress(path.read_bytes()) if opener is gzip.open else path.read_bytes()
        except (OSError, EOFError) as exc:
            raise InputError(f"candidates file {path} cannot be read as UTF-8 SD file: {exc}") from None
        raise not_utf8_error(path, raw, "sdf") from None
    except (OSError, EOFError) as exc:  # EOFError: a truncated .sdf.gz
        raise InputError(f"candidates file {path} cannot be read as UTF-8 SD file: {exc}") from None
    if not records:
        from screen.io import looks_utf16, utf16_error

        try:
            with opener(path, "rb") as fh:
                head = fh.read(4096)
        except (OSError, EOFError):
            head = b""
        if looks_utf16(head):  # UTF-16 without a byte-order mark decodes as UTF-8 with NULs: no 'M  END' line
            raise utf16_error(path, head, "sdf")
        raise InputError(f"candidates file {path} holds no SD record (no 'M  END' line): nothing to screen")
    return records


def _role_column(path) -> list[str]:
    """The ``role`` values of a levels CSV or a candidate file (``[]`` without a role column or when unreadable)."""
    import pandas as pd

    path = Path(path)
    try:
        if path.name.lower().endswith((".csv", ".csv.gz")):  # a role column in any case, as the readers take it
            frame = pd.read_csv(path, dtype=str, keep_default_na=False,
                                usecols=lambda c: str(c).strip().lower() == "role")
        else:
            from screen.prepare.readers import read_candidates

            frame = read_candidates(path)[["role"]]
    except (OSError, ValueError, KeyError, InputError):
        return []
    return [str(r).strip().lower() for r in frame.iloc[:, 0]] if frame.shape[1] else []


def _partner_role_wanted(role=None, roles_of=None) -> str | None:
    """The role a partner must have: the complement of the candidates' role (``--role``, else the one role the
    candidates' role column names); ``None`` when that is not known."""
    from screen.partners import complement

    if role in ("donor", "acceptor"):
        return complement(role)
    given = set(_role_column(roles_of)) & {"donor", "acceptor"} if roles_of is not None else set()
    return complement(given.pop()) if len(given) == 1 else None


def check_partners(specs, levels_path=None, role=None, roles_of=None) -> None:
    """Check partner specifications without computing anything.

    Library names (with "did you mean …"), files (read as one levels row),
    ``smiles:`` (parses, neutral, closed-shell) and ``id:`` (a row of the
    levels file when it exists).

    Parameters
    ----------
    specs : list of str
        The partner specifications.
    levels_path : path-like, optional
        The levels file the ``id:`` partners are rows of.
    role : str, optional
        The candidates' role (``--role``, config ``rank.role``).
    roles_of : path-like, optional
        A levels or candidate file whose ``role`` column gives the candidates' role (default ``levels_path``).
        With a role known, "did you mean" names only library partners of the other role; otherwise each
        suggestion shows its role (before, an unknown acceptor got "did you mean" a donor polymer).

    Raises
    ------
    screen.partners.PartnerError
        The first specification that cannot work.
    """
    import pandas as pd

    from screen.partners import PartnerError, partner_key, partner_kind, resolve_partner, unknown_partner

    for spec in specs:
        try:
            kind = partner_kind(spec)
        except PartnerError:
            if not str(spec or "").strip():
                raise
            wanted = _partner_role_wanted(role, roles_of if roles_of is not None else levels_path)
            raise unknown_partner(spec, role=wanted) from None
        if kind == "smiles":
            partner_key(spec)
        elif kind == "file":
            resolve_partner(spec)
        elif kind == "id" and levels_path is not None and Path(levels_path).is_file():
            ident = spec.strip()[3:].strip()
            ids = pd.read_csv(levels_path, usecols=["id"], dtype=str, keep_default_na=False)["id"]
            if ident not in set(ids):
                raise _unknown_id(spec, ident, ids, "row", levels_path)


def _unknown_id(spec: str, ident: str, ids, noun: str, where, note: str = ""):
    """The PartnerError of an ``id:`` partner whose id is not among the ``ids`` of ``where``, with "did you mean"
    the closest ids."""
    from screen.levels_check import quoted
    from screen.partners import PartnerError, suggest

    close = suggest(ident, list(ids), n=3)
    hint = f"; did you mean {' or '.join('id:' + c for c in close)}?" if close else ""
    return PartnerError(f"partner {quoted(spec.strip())}: no {noun} with id {quoted(ident)} in {where}{hint}{note}")


def check_run_partners(specs, candidates, rank_options) -> None:
    """Refuse, before a run computes anything, the partners its ranking would refuse at the end.

    ``id:<ID>`` must be a candidate of the run's file; a partner without a role of its own (``smiles:``, an
    ``id:`` row without a role, a partner file without a role column) needs the candidates' role, from
    ``rank.role`` (``--role``) or the one role the candidates' ``role`` column names. Before, both were found
    by the ranking job after every level was computed (exit 1 and a traceback).

    Parameters
    ----------
    specs : list of str
        The run's partners.
    candidates : path-like
        The candidate file (checked by :func:`check_candidates`).
    rank_options : mapping
        The ``rank`` section of the run's configuration.

    Raises
    ------
    screen.partners.PartnerError
        Naming the partner, the file and the ways on (exit code 2).
    """
    import pandas as pd

    from screen.partners import PartnerError, partner_kind, resolve_partner
    from screen.partner_library import Partner

    kinds = {spec: partner_kind(spec) for spec in specs}
    roleless = [s for s, k in kinds.items() if k in ("smiles", "id") or (k == "file" and not resolve_partner(s).role)]
    if not roleless:
        return
    from screen.io import text_cells
    from screen.levels_check import quoted
    from screen.prepare.readers import read_candidates
    from screen.rank import RankOptions, partner_role

    frame = read_candidates(candidates)
    roles = frame["role"].pipe(text_cells).str.strip().str.lower()
    options = RankOptions.from_mapping(rank_options)
    nan = float("nan")
    for spec in roleless:
        role = ""
        if kinds[spec] == "id":
            ident = spec.strip()[3:].strip()
            rows = frame.index[frame["id"].astype(str).eq(ident)]
            if not len(rows):
                raise _unknown_id(spec, ident, frame["id"].astype(str), "candidate", candidates,
                                  " (an id: partner is a row of the run's own candidates)")
            role = roles[rows[0]] if roles[rows[0]] in ("donor", "acceptor") else ""
        partner = Partner(id=spec.strip(), name=spec.strip(), role=role, homo_ev=nan, lumo_ev=nan, gap_opt_ev=nan,
                          kind=kinds[spec], spec=spec)
        try:
            partner_role(pd.DataFrame({"role": roles}), partner, options)
        except PartnerError as exc:
            if kinds[spec] != "id":  # the ranking's message, about the run's own file
                raise PartnerError(str(exc).replace("the role column of the levels file",
                                                    f"the role column of {candidates}")) from None
            raise PartnerError(f"partner {quoted(spec.strip())}: its row in {candidates} has no role, and the "
                               "candidates do not imply one (no role column, or both roles in it); set the "
                               "candidates' role (dascreen's --role donor|acceptor, rank.role in a configuration; the "
                               "partner takes the other role) or fill the role column of the candidate file") from None


# --------------------------------------------------------------------------- the output folder

_RUN_MARKS = ("config.yaml", ".dascreen.lock", "levels.csv", "work", "rankings", "logs", ".snakemake")


def check_out_folder(out, given: str | None = None) -> None:
    """Refuse an ``--out`` that is a file or lies inside a file (one message, exit code 2).

    ``given`` is the path as the user wrote it (default: ``out``).

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "afile"; _ = f.write_text("x")
    >>> try:
    ...     check_out_folder(f / "sub", "afile/sub")
    ... except ConfigError as exc:
    ...     print(str(exc).endswith("afile is a file, not a folder; choose an --out folder outside it"))
    True
    """
    if given is not None and not str(given).strip():  # `--out ''` was the current folder (dascreen rank wrote there)
        raise ConfigError("--out '' names no folder; give a folder, e.g. --out results (a new one is created)")
    out = Path(out)
    given = str(out) if given is None else given
    if out.exists() and not out.is_dir():
        raise ConfigError(f"--out {given} is a file, not a folder; choose a folder (a new one is created)")
    parent = nearest_existing(out.absolute().parent)
    if not parent.is_dir():
        raise ConfigError(f"--out {given}: {parent} is a file, not a folder; choose an --out folder outside it")


def check_out_writable(out, given: str | None = None, what: str = "") -> None:
    """Refuse an ``--out`` this process cannot write in (or create), before any work (one message, exit code 2).

    ``what``: what goes there, said when the folder exists (e.g. ``" (the ranking goes to OUT/rankings)"``).
    ``dascreen rank`` into a read-only folder said "…/rankings: Permission denied" after ranking, while ``dascreen
    run`` said "--out … is not writable" (an audit of unusual environments).

    Examples
    --------
    >>> import tempfile
    >>> check_out_writable(Path(tempfile.mkdtemp()) / "new")
    """
    out = Path(out)
    given = str(out) if given is None else given
    if out.is_dir():
        if not os.access(out, os.W_OK | os.X_OK):
            raise ConfigError(f"--out {given} is not writable{what}; choose a folder you can write to")
        return
    parent = nearest_existing(out.absolute().parent)
    if parent.is_dir() and not os.access(parent, os.W_OK | os.X_OK):
        raise ConfigError(f"--out {given}: cannot create it, {parent} is not writable; choose a folder you can "
                          "write to")


def make_out_folder(out, given: str | None = None) -> None:
    """Create the ``--out`` folder (the first thing a command writes), or refuse it in one message.

    A folder that cannot be created (``/sys/x``: not permitted; ``/proc/x``: no such file or directory) gave a
    traceback or a bare ``[Errno 2]``; the message names the path and the system's reason (exit code 2).

    Examples
    --------
    >>> import tempfile
    >>> afile = Path(tempfile.mkdtemp()) / "f"; _ = afile.write_text("x")
    >>> try:
    ...     make_out_folder(afile / "sub", "f/sub")
    ... except ConfigError as exc:
    ...     print(str(exc)[:36])
    --out f/sub: cannot create the folde
    """
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ConfigError(f"--out {out if given is None else given}: cannot create the folder {out.absolute()}: "
                          f"{read_problem(exc)}; choose a folder you can write to") from None


def check_out(out, candidates=None, overwrite: bool = False, given: str | None = None) -> None:
    """Refuse an output folder that would mix two runs or is not a run folder.

    Parameters
    ----------
    out : path-like
        The ``--out`` folder (need not exist).
    candidates : path-like, optional
        The run's candidate file; a folder holding the run of another file is refused.
    overwrite : bool
        Accept a folder holding the run of another candidate file (or whose ``config.yaml`` cannot be read).
    given : str, optional
        ``--out`` as the user wrote it (an empty one is refused).

    Raises
    ------
    ConfigError
        ``out`` is empty text, a file, not writable, holds files of something other than
        a dascreen run, is in use by a running ``dascreen``, holds the run
        of another candidate file, or a ``config.yaml`` that cannot be read (not UTF-8, not YAML)
        (the last two without ``overwrite``).
    """
    out = Path(out)
    check_out_folder(out, given)
    if not out.exists():
        parent = nearest_existing(out.absolute().parent)
        if not _writable(parent):
            raise ConfigError(f"--out {out}: cannot create it, {parent} is not writable")
        return
    if not _writable(out):
        raise ConfigError(f"--out {out} is not writable")
    entries = {p.name for p in out.iterdir()}
    nested = all(p.is_dir() and {q.name for q in p.iterdir()} & set(_RUN_MARKS) for p in out.iterdir())
    if entries and not entries & set(_RUN_MARKS) and not nested:  # e.g. results/ holding results/calibration
        raise ConfigError(f"--out {out} is not empty and holds no dascreen run ({len(entries)} other entries); "
                          "choose a new or empty folder")
    if run_active(out):
        from screen.errors import FolderInUse  # not a configuration problem; exit code 2 like one

        raise FolderInUse.of(out)
    if not overwrite and (out / "config.yaml").is_file():
        try:
            recorded = load_yaml((out / "config.yaml").read_text(encoding="utf-8")) or {}
        except (OSError, UnicodeDecodeError, yaml.YAMLError) as exc:  # a binary file gave a traceback
            raise ConfigError(f"--out {out}: its config.yaml, the record of the folder's run, cannot be read "
                              f"({read_problem(exc)}: {out / 'config.yaml'}); choose another --out, or pass "
                              "--overwrite to replace the record") from None
        before = recorded.get("candidates") if isinstance(recorded, dict) else None
        now = str(Path(candidates).resolve()) if candidates is not None else None
        if now and before and str(before) != now:
            raise ConfigError(f"--out {out} holds the run of {before}; this run is of {now}. Choose another --out "
                              "(molecules already computed come from the results store) or pass --overwrite")


_PROFILE_FILE = re.compile(r"(?P<name>profile|config)(?:\.v(?P<major>\d+)\+)?\.yaml")


def _profile_files(folder: Path) -> list[Path]:
    """The settings files of a Snakemake profile folder the installed Snakemake reads (``config.yaml``,
    ``profile.yaml`` or a version's ``config.v9+.yaml``), the one it picks first."""
    try:
        import snakemake

        major = int(str(snakemake.__version__).split(".")[0].split("+")[0])
    except (ImportError, ValueError):
        major = 10 ** 6
    found = []
    for path in sorted(folder.iterdir()):
        match = _PROFILE_FILE.fullmatch(path.name)
        if match and path.is_file() and int(match.group("major") or 0) <= major:
            found.append((int(match.group("major") or 0), path))
    return [p for _, p in sorted(found, key=lambda f: -f[0])]


def _engine_options() -> tuple[set[str], list[str]] | None:
    """The option names the workflow engine takes in a profile (``cores``, ``executor`` …; those of the installed
    executor plugins included) and the executors installed; None if not known."""
    try:
        from snakemake.cli import get_argument_parser

        parser = get_argument_parser()
        names = {s.lstrip("-") for action in parser._actions for s in action.option_strings}
        executor = next(a for a in parser._actions if "--executor" in a.option_strings)
        return names, [str(c) for c in (executor.choices or [])]
    except Exception:  # noqa: BLE001 - an engine without this API: the engine itself checks the names
        return None


def check_profile(profile) -> None:
    """Refuse a ``--profile`` that is not a Snakemake profile folder, before anything is computed.

    A missing folder was ignored (the run went on locally, exit 0) and a broken ``config.yaml`` stopped the
    workflow engine with exit 1 and its 80-line usage text (a new user's audit). Checked: the folder exists and
    holds a readable ``config.yaml`` (or ``profile.yaml``) of UTF-8 YAML with a mapping of the workflow
    engine's options.

    Raises
    ------
    ConfigError
        Naming ``--profile``, the file and what is wrong (exit code 2).

    Examples
    --------
    >>> try:
    ...     check_profile("no/such/profile")
    ... except ConfigError as exc:
    ...     print(str(exc)[:47])
    --profile no/such/profile: no such folder; a Sn
    """
    if profile is None:
        return
    given = str(profile)
    if not given.strip():
        raise ConfigError("--profile '' names no folder; give a Snakemake profile folder (e.g. profiles/slurm) or "
                          "leave --profile out to run on this machine")
    folder = Path(given).expanduser()
    about = ("a Snakemake profile is a folder holding config.yaml with the workflow engine's options (e.g. "
             "profiles/slurm)")
    if not folder.exists():
        near = _near_files(folder) if folder.parent.is_dir() else []
        hint = f"; did you mean {' or '.join(near)}?" if near else ""
        raise ConfigError(f"--profile {given}: no such folder{hint}; {about}")
    if not folder.is_dir():
        raise ConfigError(f"--profile {given} is a file, not a folder; {about}: give the folder that holds it")
    files = _profile_files(folder)
    if not files:
        raise ConfigError(f"--profile {given}: the folder holds no config.yaml; {about}")
    path = files[0]
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))  # a workflow-engine profile may use anchors
    except (OSError, UnicodeDecodeError, yaml.YAMLError, RecursionError) as exc:
        raise ConfigError(f"--profile {given}: {path} cannot be read: "
                          f"{'nested too deeply' if isinstance(exc, RecursionError) else read_problem(exc)}") from None
    if not isinstance(data, dict) or not data:
        what = "is empty" if data is None else f"holds {type(data).__name__}, not a mapping"
        raise ConfigError(f"--profile {given}: {path} {what}; write the workflow engine's options as `name: value` "
                          "lines, e.g. `executor: slurm`")
    engine = _engine_options()
    if engine is None:
        return
    known, executors = engine
    executor = data.get("executor")
    if executor is not None and not isinstance(executor, str):
        raise ConfigError(f"--profile {given}: {path}: executor is a {type(executor).__name__}; write its name, e.g. "
                          "`executor: slurm`")
    if executor is not None and executors and str(executor) not in executors:
        raise ConfigError(f"--profile {given}: {path} asks for executor {str(executor)!r}, which is not installed "
                          f"(installed: {', '.join(executors)}); install its plugin (for SLURM: pip install -e "
                          "'.[cluster]') or choose an installed one")
    unknown = [str(k) for k in data if str(k) not in known]
    if unknown:
        from screen.partners import suggest

        close = suggest(unknown[0], sorted(known), n=2, cutoff=0.75)
        hint = f" (did you mean {' or '.join(close)}?)" if close else ""
        raise ConfigError(f"--profile {given}: {path} sets {', '.join(repr(k) for k in unknown[:5])}, not an option "
                          f"of the workflow engine{hint}; its names are the engine's command-line options without "
                          "the leading dashes (`snakemake --help`), e.g. cores, executor, default-resources")


def _writable(folder: Path) -> bool:
    import os

    return os.access(folder, os.W_OK | os.X_OK)


def run_active(out) -> bool:
    """True while a ``dascreen`` process holds the run lock of ``out`` (``.dascreen.lock``).

    Only looks: no lock file is created, and one this process may not write (a run folder shared read-only) is
    opened for reading and tested with a shared lock, which a running ``dascreen``'s exclusive lock refuses
    (before, ``dascreen status`` of such a folder stopped with "Permission denied").

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> run_active(folder), (folder / ".dascreen.lock").exists()
    (False, False)
    """
    import fcntl

    lock = Path(out) / ".dascreen.lock"
    if not lock.is_file():
        return False
    writable = os.access(lock, os.W_OK)
    with open(lock, "a" if writable else "r") as fh:
        try:
            fcntl.flock(fh, (fcntl.LOCK_EX if writable else fcntl.LOCK_SH) | fcntl.LOCK_NB)
        except BlockingIOError:
            return True
        fcntl.flock(fh, fcntl.LOCK_UN)
    return False


# --------------------------------------------------------------------------- energy scales of the partners

def check_partner_scales(specs, scale: str) -> None:
    """Refuse a run whose levels scale differs from a partner's, before anything is computed.

    The ranking refuses to combine levels and a partner on different energy
    scales (``docs/contracts.md`` §6); a run would find that out only after it
    computed every level. ``smiles:`` and ``id:`` partners are computed with the
    run's own settings, so they are on its scale and pass.

    Parameters
    ----------
    specs : list of str
        Every partner the run ranks against.
    scale : str
        The run's ``levels.scale`` (``film`` or ``gas``).

    Raises
    ------
    ScaleMismatchError
        Naming the partner, both scales and the fixes (exit code 2).

    Examples
    --------
    >>> check_partner_scales(["y6"], "film")
    >>> try:
    ...     check_partner_scales(["y6"], "gas")
    ... except InputError as exc:
    ...     print(str(exc)[:61])
    partner 'y6' (built-in library) is on the 'film' scale, as is
    """
    from screen.errors import ScaleMismatchError
    from screen.partners import partner_kind, resolve_partner

    for spec in specs:
        if partner_kind(spec) not in ("library", "file"):
            continue
        partner = resolve_partner(spec)
        if partner.scale == scale:
            continue
        where = "built-in library" if partner.kind == "library" else f"file {partner.spec}"
        library = ", as is every built-in partner" if partner.kind == "library" else ""
        raise ScaleMismatchError(
            f"partner {partner.id!r} ({where}) is on the {partner.scale!r} scale{library}, but this run's levels "
            f"are on the {scale!r} scale (levels.scale={scale}); the ranking never mixes scales, so nothing was "
            f"computed. Either drop levels.scale={scale} (levels.scale={partner.scale} is the "
            f"{'device model' if partner.scale == 'film' else 'partner'}'s scale), or give a partner on the "
            f"{scale!r} scale: a one-row levels CSV with scale {scale}, or smiles:<SMILES> (computed with this "
            "run's settings, on its scale)")


# --------------------------------------------------------------------------- calibration

@lru_cache(maxsize=1)
def _flat_defaults() -> dict:
    """Every setting's default as ``{"section.key": value}`` (the schema's; not to be changed by callers)."""
    from screen.schema import defaults

    return _flat(defaults())


@dataclass(frozen=True)
class CalibrationDifference:
    """One way a run's settings differ from a shipped calibration's."""

    field: str  #: a config field (``polymer.n_max``), ``engine_version`` or ``calibration.reference``
    here: object
    shipped: object

    @property
    def is_setting(self) -> bool:
        """True for a config field the user can set back (not the engine version or the reference data)."""
        return self.field not in ("engine_version", "calibration.reference")

    @property
    def chosen(self) -> bool:
        """True for a setting the run gives a value other than its default (one the user chose)."""
        return self.is_setting and self.here != _flat_defaults().get(self.field, object())

    def text(self, engine: str = "engine") -> str:
        """The difference in words, e.g. ``polymer.n_max: 2 here, 4 in the shipped calibration``."""
        if self.field == "engine_version":
            return f"{engine} version {self.here} here, {self.shipped} in the shipped calibration"
        if self.field == "calibration.reference":  # shipped: where the calibration's data are, in words
            fitted = f" ({self.shipped})" if self.shipped else ""
            return (f"calibration.reference: the reference data in {self.here} are not the ones the calibration "
                    f"was fitted on{fitted}")
        default = "" if self.chosen else " (the default)"
        return f"{self.field}: {_show(self.here)}{default} here, {_show(self.shipped)} in the shipped calibration"


def calibration_differences(cfg) -> tuple[Path | None, list[CalibrationDifference]]:
    """The shipped calibration closest to a run's settings, and how the run differs from it.

    A calibration (``models/<protocol-id>/``) records a fingerprint: the
    ``structures`` and ``electronic`` settings (the protocol), the ``polymer``
    settings, the engine version and a hash of the reference data
    (:func:`screen.calibrate.fingerprint`). The folder of the run's protocol id
    is compared when there is one, else the folder with the fewest differences.

    Returns
    -------
    folder : Path or None
        The closest calibration folder in ``calibration.models`` (``None``: it holds none).
    differences : list of CalibrationDifference
        Empty when the folder matches.

    Examples
    --------
    >>> from screen.config import Config
    >>> from screen.cli_shared import data_path
    >>> folder, diffs = calibration_differences(Config.of({"polymer": {"n_max": 2}}).with_paths(data_path))
    >>> folder.name == Config.of({}).protocol_id, [d.text() for d in diffs]
    (True, ['polymer.n_max: 2 here, 4 in the shipped calibration'])
    """
    from screen.calibrate import _fitted_on_text, fingerprint, fingerprint_fields, fitted_reference, \
        installed_fingerprint

    expected = fingerprint(cfg, cfg["calibration"]["reference"])
    models = Path(cfg["calibration"]["models"])
    best: tuple | None = None
    for folder in sorted(models.iterdir()) if models.is_dir() else []:
        found = installed_fingerprint(folder)
        if not found:
            continue
        diffs = []
        for field, here, there in fingerprint_fields(found, expected):  # the protocol id ranks, below
            if field == "reference_sha256":
                diffs.append(CalibrationDifference("calibration.reference", cfg["calibration"]["reference"],
                                                   _fitted_on_text(fitted_reference(folder))))
            elif field != "protocol_id":
                diffs.append(CalibrationDifference(field, here, there))
        # closest: fewest differences in settings the run chose (not at their defaults), then fewest in all: with
        # `--set structures.geometry=xtb` the xTB-geometry calibration (one default differs), not the default one
        rank = (found.get("protocol_id") != expected["protocol_id"], sum(d.chosen for d in diffs), len(diffs))
        if best is None or rank < best[0]:
            best = (rank, folder, diffs)
    return (None, []) if best is None else (best[1], best[2])


def reference_count(cfg) -> int:
    """Distinct reference materials a calibration computes."""
    from screen.calibration.reference import canonical, read_reference

    sets = read_reference(cfg["calibration"]["reference"])
    return len({canonical(s) for frame in sets.values() if "smiles" in frame for s in frame["smiles"].dropna()})


def fitted_in(out, cfg) -> bool:
    """True when ``out`` already holds a calibration of this run's settings (fitted by an earlier run there)."""
    from screen.calibrate import CalibrationError, load_models

    folder = Path(out) / "models" / cfg.protocol_id
    if not folder.is_dir():
        return False
    try:
        load_models(folder, cfg)
    except CalibrationError:
        return False
    return True


def calibration_text(cfg, out=None) -> str | None:
    """Why no calibration serves a run and what calibrating costs (``None`` when one matches).

    Names every setting that differs from the closest shipped calibration, e.g.
    ``polymer.n_max: 2 here, 4 in the shipped calibration``.
    """
    gap = _calibration_gap(cfg, out)
    return None if gap is None else gap[0]


def _calibration_gap(cfg, out=None) -> tuple[str, Path | None, list[CalibrationDifference]] | None:
    """:func:`calibration_text` with the closest folder and the differences it was written from (``None`` when a
    calibration matches)."""
    from screen.calibrate import find_models

    if find_models(cfg) is not None or (out is not None and fitted_in(out, cfg)):
        return None
    models = Path(cfg["calibration"]["models"])
    pid = cfg.protocol_id
    folder, diffs = calibration_differences(cfg)
    listed = "; ".join(d.text(cfg["electronic"]["engine"]) for d in diffs)
    if not models.is_dir():
        why = f"{models} does not exist" if not models.exists() else f"{models} is a file, not a folder"
    elif folder is None:
        why = f"{models} holds no calibration"
        from screen.config import PACKAGE_ROOT

        shipped = PACKAGE_ROOT / "models"
        if models.name == "models" and models.resolve() != shipped.resolve() and shipped.is_dir():
            # a folder of the working directory named like the default hides the shipped calibration (a review)
            why += (f"; a models folder of the working directory is used before the shipped one, {shipped}: to use "
                    f"that, run elsewhere or give --set calibration.models={shipped}")
    elif not diffs:
        why = f"{folder} has this run's settings but its model files are incomplete or unreadable"
    elif folder.name == pid:
        from screen.config import PACKAGE_ROOT

        whose = ("the shipped calibration" if folder.resolve() == (PACKAGE_ROOT / "models" / pid).resolve() else
                 f"the calibration in {folder}")
        why = f"{whose} of protocol {pid} was fitted with other settings: {listed}"
    else:
        why = f"protocol {pid} has no shipped calibration; the closest, {folder.name}, differs: {listed}"
    return (f"no calibration in {models} matches this run's settings ({why}). Calibrating them computes the "
            f"{reference_count(cfg)} reference materials first (polymers as oligomer series) — hours on a few "
            "cores, once per set of settings"), folder, diffs


def _calibrate_command(cfg, diffs, config_file=None) -> str:
    """The ``dascreen calibrate`` command line that fits a calibration of the run's settings: every setting of the
    protocol and polymer sections that differs from its default (not only those that differ from the closest
    calibration: with `--set structures.geometry=xtb` that one is the xTB-geometry calibration)."""
    import shlex

    words = ["dascreen calibrate"]
    if config_file:
        words.append(f"--config {shlex.quote(str(config_file))}")
    words += calibration_set_args(cfg)
    if any(d.field == "calibration.reference" for d in diffs):
        words.append(f"--reference {shlex.quote(str(cfg['calibration']['reference']))}")
    words.append(f"--install {shlex.quote(str(_install_folder(cfg)))}")
    return " ".join(words)


def _install_folder(cfg) -> Path:
    """Where a calibration of the run's own settings should go: ``calibration.models`` when that holds no
    calibration of this protocol id yet, else a sibling folder (``<models>-custom``), so that installing it
    never replaces the shipped calibration of the same protocol id (polymer settings and reference data are
    not part of the id).

    Examples
    --------
    >>> import tempfile
    >>> from screen.config import Config
    >>> empty = Config.of({"calibration": {"models": tempfile.mkdtemp()}})
    >>> _install_folder(empty) == Path(empty["calibration"]["models"])  # no calibration of this protocol there yet
    True
    """
    models = Path(str(cfg["calibration"]["models"]))
    return models.with_name(f"{models.name}-custom") if (models / cfg.protocol_id).is_dir() else models


def _run_with(cfg) -> str:
    """What the run then needs to find a calibration installed by :func:`_install_folder` ('' when it is the default)."""
    import shlex

    target = _install_folder(cfg)
    if target == Path(str(cfg["calibration"]["models"])):
        return ""
    return (f", and add --set calibration.models={shlex.quote(str(target))} to the run (a folder of its own: "
            "the shipped calibration of this protocol stays as it is)")


def check_calibration(cfg, out, config_file=None) -> None:
    """Refuse a ``dascreen run`` whose settings no calibration serves, unless it opted in to calibrate.

    A run needs calibration models fitted with its very settings (the protocol,
    the polymer settings, the engine version, the reference data). Without one,
    the workflow would first compute every reference material (hours) as a side
    effect of an option; ``dascreen run`` refuses that unless the run opted in
    with ``calibration.refit=always`` (or the run folder already holds a
    matching calibration). The message names the settings that differ from the
    shipped calibration and the three ways on.

    Raises
    ------
    ConfigError
        No calibration matches and ``calibration.refit`` is ``auto`` or ``never`` (exit code 2).
    """
    import shlex

    refit = cfg["calibration"]["refit"]
    if refit == "always":
        return
    models = Path(str(cfg["calibration"]["models"]))
    if not models.is_dir():  # before, "no calibration ... calibrate these settings once (hours)" for a typo
        what = "is a file, not a folder" if models.exists() else "does not exist"
        raise ConfigError(f"calibration.models {models} {what}; give the folder that holds the calibrations "
                          "(models/<protocol-id>/ folders, e.g. the shipped models), or leave calibration.models "
                          "out for the shipped one; nothing was computed")
    gap = _calibration_gap(cfg, out if refit == "auto" else None)
    if gap is None:
        return
    text, folder, diffs = gap
    settings = [d for d in diffs if d.is_setting]
    ways = []
    if settings:
        back = " ".join(f"--set {shlex.quote(f'{d.field}={_show(d.shipped)}')}" for d in settings)
        given = [d.field for d in settings if d.chosen]  # not a default the user did not set
        cost = " (xTB-optimised geometries: several times the cost per molecule)" if any(
            d.field == "structures.geometry" and d.shipped == "xtb" for d in settings) else ""
        ways.append(f"use the shipped calibration: drop {', '.join(given)} (or {back}){cost}" if given
                    else f"use the shipped calibration: add {back}{cost}")
    if any(d.field == "engine_version" for d in diffs):
        shipped = next(d.shipped for d in diffs if d.field == "engine_version")
        ways.append(f"use the shipped calibration: install {cfg['electronic']['engine']} {shipped}.x")
    reference_only = folder is not None and folder.name == cfg.protocol_id and [d.field for d in diffs] == [
        "calibration.reference"]
    if reference_only:  # the reference data it was fitted on first; no refit that gives the shipped numbers again
        from screen.calibrate import reference_ways

        found = reference_ways(folder, cfg["calibration"]["reference"], install=str(_install_folder(cfg)),
                               run_with=_run_with(cfg))
        ways += found.texts
    if not (reference_only and found.shipped_serves):
        ways.append(f"calibrate these settings once, then run again: {_calibrate_command(cfg, diffs, config_file)}"
                    f"{_run_with(cfg)}")
    ways.append("calibrate within this run: add --set calibration.refit=always")
    stop = "calibration.refit is 'never'" if refit == "never" else "nothing was computed"
    raise ConfigError(f"{text}; {stop}. Either\n" + "\n".join(f"  - {w}" for w in ways))

