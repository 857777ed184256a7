"""Dye-cell stage, files in → files out: levels (or a dye file) + oxide + mediator → ranking folder.

::

    OUT/levels.csv  (a run's, raw xTB values)      or   a dye file (measured potentials)
       │ dye_table: dye models (models/dyecell/<protocol-id>/) → E(S⁺/S), E₀₋₀, σ; anchors; element check
       ▼
    OUT/dyecell/dyes.csv (+ .meta.json)            cached: reused while levels, models and version are unchanged
       │ rank_dyes: oxide + mediator → driving forces, viability, Voc, Jsc, PCE, Monte-Carlo spread
       ▼
    OUT/dyecell/<oxide>--<mediator>--<settings hash>/ranking.csv, ranking.safe.csv, ranking.meta.json,
                                                    shortlist.sdf, report.html

The expensive stages (structures, electronic) are those of the
bulk-heterojunction route and depend only on the molecule and the protocol:
switching oxide or mediator re-runs only the last step.  Folder names are the
library ids, or ``file-<stem>-<hash>`` for a user's one-row file (ids are user
text and never used in paths), and :func:`settings_hash` of the other
``dyecell`` settings, so a ranking with another threshold or loss gets its own
folder (as ``OUT/rankings/<partner>--<settings hash>`` of ``dascreen rank``).

A folder that holds a run keeps that run's ranking: a levels file that is not
the run's own (:func:`own_levels`: ``OUT/dyecell/levels_raw.csv``,
``OUT/levels.csv``), e.g. a file of measured potentials, is ranked into
``<oxide>--<mediator>--<settings hash>--levels-<file stem>-<hash of its path>``
(:func:`levels_tag`) with its dye table in ``OUT/dyecell/dyes--<tag>.csv``, so
the run's own ranking and dye table are never replaced by another input's.
"""

from __future__ import annotations

import sys
from dataclasses import asdict
from pathlib import Path

import pandas as pd

from screen import __version__
from screen.dyecell.calibrate import MODELS_DIR, load_models, reference_file
from screen.dyecell.flags import describe
from screen.dyecell.library import Material, plausibility_notice, resolve_material, type_assumed_notice
from screen.dyecell.model import DyeCellModel
from screen.dyecell.options import RankOptions, option_defaults
from screen.dyecell.rank import (
    DYE_COLUMNS,
    EXTRA_COLUMNS,
    RANKING_COLUMNS,
    conversion_summary,
    dye_table,
    dyes_from_file,
    rank_dyes,
    value_sources,
)
from screen.errors import ConfigError, DascreenError, InputError
from screen.io import SD_LINE_MAX, read_json, sd_text, write_csv, write_json
from screen.partners import file_tag
from screen.provenance import change_notice, library_versions, sha256_file
from screen.rank_io import RANKING_META, clear_previous_ranking
from screen.schema import check_section

__all__ = ["read_input", "build_dye_table", "sign_convention", "EXCITED_COLUMN_MEANING", "write_shortlist",
           "run_dyecell", "ranking_folder", "raw_levels",
           "settings_hash", "shipped_protocols", "INPUTS_FILE", "read_inputs", "record_inputs", "OWN_LEVELS",
           "own_levels", "levels_tag", "replacing_notice"]

#: the record of what was given in a run folder: ``OUT/dyecell/inputs.json`` (the user's candidate file: path and
#: sha256; the input ranked last), read for the default re-rank input and the guard against mixing candidate files
INPUTS_FILE = Path("dyecell") / "inputs.json"
#: the levels files a run writes into its own folder, in the order a re-rank takes them: a computing dye run's raw
#: values, then a ``dascreen run``'s levels (relative to ``OUT``)
OWN_LEVELS = (Path("dyecell") / "levels_raw.csv", Path("levels.csv"))
#: settings of the ``dyecell`` section that are in the folder name already (or only pick the library entry)
_NAMED_SETTINGS = ("oxide", "mediator")

_SD_PROPS = ["rank", "id", "name", "oxide", "mediator", "e_ox_v_nhe", "e_ox_sigma_v", "e00_ev", "e00_sigma_ev",
             "e_ox_excited_v_nhe", "drive_inj_ev", "drive_reg_ev", "anchors", "voc_v", "jsc_ma_cm2", "ff", "pce_pct",
             "pce_sigma_pct", "p_above_target", "p_viable", "flags", "smiles"]


def raw_levels(out_dir: str | Path, config, batch: str = "candidates", set_aside: pd.DataFrame | None = None) -> Path:
    """``OUT/dyecell/levels_raw.csv``: a batch's rows joined with their raw xTB values, without calibration.

    The dye models need only the raw ``xtb_*`` columns, so the dye-cell mode
    does not wait for the bulk-heterojunction calibration of the protocol: the
    workflow's prepare, structures and electronic stages are run for the batch
    and this function performs the join of the levels stage
    (:func:`screen.levels.assemble`, polymers at their chain limit).

    Parameters
    ----------
    out_dir : path-like
        The run folder (``OUT/work/<batch>/prepared`` and ``electronic`` exist).
    config : screen.config.Config
        The run's configuration (its protocol id goes into the sidecar).
    set_aside : pandas.DataFrame, optional
        Rows of the user's file that were left out of the computation (polymer
        repeat units, :func:`screen.dyecell.cli._set_aside`), with their 0-based
        input position in ``row``: put back at their place as rejected rows, so
        the levels file holds one row per input row.

    Returns
    -------
    pathlib.Path
        The levels file; its sidecar records the protocol and library versions.
    """
    from screen.config import Config
    from screen.provenance import provenance
    from screen.levels import read_computed

    cfg = Config.of(config)
    work = Path(out_dir) / "work" / batch
    shards = sorted((work / "prepared").glob("shard-*.csv"))
    missing = [str(work / "electronic" / s.name) for s in shards if not (work / "electronic" / s.name).is_file()]
    if missing:
        raise InputError(f"the batch {batch} in {out_dir} is not computed yet (missing {missing[0]})")
    levels, _ = read_computed(work / "prepared" / "manifest.csv", [work / "electronic" / s.name for s in shards],
                              cfg)
    if set_aside is not None and len(set_aside):
        levels = _put_back(levels, set_aside)
    target = Path(out_dir) / "dyecell" / "levels_raw.csv"
    write_csv(levels, target)
    write_json({**provenance(cfg), "batch": batch, "scale": "none (raw xTB values; dye models calibrate them)",
                "input": cfg["candidates"]}, Path(f"{target}.meta.json"))
    return target


def _put_back(levels: pd.DataFrame, aside: pd.DataFrame) -> pd.DataFrame:
    """``levels`` (rows of the computed copy, in order) with the set-aside rows back at their input positions.

    Examples
    --------
    >>> lv = pd.DataFrame({"id": ["a", "c"], "status": ["ok", "ok"], "xtb_ip_ev": [11.0, 10.5]})
    >>> back = pd.DataFrame({"row": [1], "id": ["b"], "status": ["rejected"], "error": ["not a dye"]})
    >>> _put_back(lv, back)[["id", "status"]].values.tolist()
    [['a', 'ok'], ['b', 'rejected'], ['c', 'ok']]
    """
    aside = aside.reset_index(drop=True)
    total = len(levels) + len(aside)
    taken = set(int(r) for r in aside["row"])
    kept = [r for r in range(total) if r not in taken]
    if len(kept) != len(levels):  # positions do not fit: keep every row, the set-aside ones last
        kept = list(range(len(levels)))
        aside = aside.assign(row=range(len(levels), total))
    both = pd.concat([levels.assign(_pos=kept), aside.rename(columns={"row": "_pos"})], ignore_index=True)
    return both.sort_values("_pos", kind="stable").drop(columns="_pos").reset_index(drop=True)


def read_input(path: str | Path) -> tuple[str, pd.DataFrame, dict | None]:
    """Read a levels file or a dye file: ``("levels" | "dyes", frame, sidecar or None)``.

    A file with raw ``xtb_ip_ev`` values is a run's levels; anything else is a
    user's dye file (:func:`screen.dyecell.rank.dyes_from_file`).  A UTF-16 file is refused with the command that
    converts it (:func:`screen.io.utf16_error`, as :func:`screen.io.read_csv_checked` refuses one).  A row with
    more fields than the header is refused with its line
    (:func:`screen.dyecell.checks.check_field_counts`).  Blanks after the commas
    (``id, e_ox_v_nhe, e00_ev``) and around the column names are dropped.
    """
    import codecs

    from screen.dyecell.checks import check_field_counts
    from screen.io import looks_utf16, utf16_error

    path = Path(path)
    if path.is_dir():
        raise InputError(f"dye-cell input {path} is a directory, not a file; give the levels or dye file in it")
    if not path.is_file():
        raise InputError(f"dye-cell input {path} does not exist")
    with open(path, "rb") as handle:
        head = handle.read(4096)
    if looks_utf16(head):  # UTF-16 without a byte-order mark: "needs an id column" for a header of 'i\x00d\x00'
        raise utf16_error(path, head)
    check_field_counts(path, "dye-cell input")
    try:
        # blanks around the names ("id, e_ox_v_nhe") are dropped, as one-row oxide and mediator files drop them;
        # the header is read as the rows are (skipinitialspace), so the id column is text under the name pandas
        # gives it: a maintainer's review found " id" missed and the ids 007 and 1e3 ranked as 7.0 and 1000.0
        header = pd.read_csv(path, nrows=0, skipinitialspace=True).columns
        ids = {c: str for c in header if str(c).strip() in ("id", "name")}
        frame = pd.read_csv(path, dtype=ids, keep_default_na=False, na_values=[""], skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        if isinstance(exc, UnicodeDecodeError) and head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
            raise utf16_error(path, head) from None  # a spreadsheet's "Unicode text", as read_csv_checked says
        raise InputError(f"{path} cannot be read as CSV: {exc}") from exc
    frame.columns = [str(c).strip() for c in frame.columns]
    if frame.empty:
        raise InputError(f"{path}: no rows (only a header); give one dye per line: id,e_ox_v_nhe,e00_ev "
                         "(or a dascreen run's levels.csv)")
    side = Path(f"{path}.meta.json")
    meta = read_json(side) if side.is_file() else None
    kind = "levels" if "xtb_ip_ev" in frame.columns else "dyes"
    return kind, frame, meta


def shipped_protocols(root: str | Path | None = None) -> list[str]:
    """Protocol ids that have dye models under ``root`` (default ``models/dyecell``).

    Examples
    --------
    >>> len(shipped_protocols()) >= 1
    True
    """
    folder = Path(root or MODELS_DIR)
    return sorted(p.parent.name for p in folder.glob("*/e_ox.json") if (p.parent / "e00.json").is_file())


def read_inputs(out_dir: str | Path) -> dict:
    """``OUT/dyecell/inputs.json`` (:data:`INPUTS_FILE`): what was given in this folder (``{}`` if none)."""
    side = Path(out_dir) / INPUTS_FILE
    try:
        return read_json(side) if side.is_file() else {}
    except ValueError:
        return {}


def record_inputs(out_dir: str | Path, **entries) -> None:
    """Add ``entries`` (``candidates={"path", "sha256"}``, ``levels=path``) to ``OUT/dyecell/inputs.json``."""
    write_json({**read_inputs(out_dir), **entries}, Path(out_dir) / INPUTS_FILE)


def own_levels(out_dir: str | Path) -> list[Path]:
    """The run's own levels files in ``out_dir`` (:data:`OWN_LEVELS` that exist, resolved); empty: no run here.

    Examples
    --------
    >>> import tempfile
    >>> out = Path(tempfile.mkdtemp())
    >>> own_levels(out)
    []
    >>> _ = (out / "levels.csv").write_text("id")
    >>> [p.name for p in own_levels(out)]
    ['levels.csv']
    """
    out = Path(out_dir)
    return [(out / rel).resolve() for rel in OWN_LEVELS if (out / rel).is_file()]


def levels_tag(input_path: str | Path, out_dir: str | Path) -> str:
    """Folder-name suffix of an input that is not the run's own levels, in a folder that holds a run; else ``""``.

    ``levels-<slugified file stem>-<first 6 hex digits of the sha256 of its
    resolved absolute path>``: the same file always ranks into the same
    folder, two files of one name in different places into two.  A folder
    without a run's levels (:func:`own_levels`) keeps the plain names, and so
    does the run's own levels file given with ``--levels``.

    Examples
    --------
    >>> import tempfile
    >>> out = Path(tempfile.mkdtemp())
    >>> levels_tag(out / "my dyes.csv", out)                    # no run here: plain names
    ''
    >>> _ = (out / "levels.csv").write_text("id")
    >>> levels_tag(out / "levels.csv", out)                     # the run's own levels
    ''
    >>> tag = levels_tag(out / "my dyes.csv", out)
    >>> tag[:15], len(tag.rsplit("-", 1)[1])
    ('levels-my-dyes-', 6)
    """
    own = own_levels(out_dir)
    if not own or Path(input_path).resolve() in own:
        return ""
    return file_tag(input_path)


def replacing_notice(old: dict, path: str, sha: str) -> str:
    """What changed since a ranking folder's earlier ranking: ``""`` when its input had this path and content.

    Parameters
    ----------
    old : dict
        ``dyes`` of the earlier ``ranking.meta.json`` (``input``, ``input_sha256``).
    path, sha : str
        Resolved path and sha256 of the input about to be ranked.

    Examples
    --------
    >>> replacing_notice({"input": "/r/d.csv", "input_sha256": "ab" * 32}, "/r/d.csv", "ab" * 32)
    ''
    >>> replacing_notice({"input": "/r/d.csv", "input_sha256": "ab" * 32}, "/r/d.csv", "cd" * 32)
    '/r/d.csv changed since it was ranked (sha256 abababab… → cdcdcdcd…)'
    >>> replacing_notice({"input": "/r/old.csv", "input_sha256": "ab" * 32}, "/r/d.csv", "cd" * 32)
    'it ranked /r/old.csv, whose content differs from /r/d.csv'
    """
    return change_notice(old.get("input"), old.get("input_sha256"), path, sha, "an input not recorded")[0]


def _tell_replacing(target: Path, info: dict) -> None:
    """Say on stderr when the ranking folder ``target`` held a ranking of another input or other content."""
    side = target / "ranking.meta.json"
    if not side.is_file():
        return
    try:
        old = read_json(side)
    except ValueError:
        old = {}
    old = (old.get("dyes") if isinstance(old, dict) else None) or {}
    message = replacing_notice(old if isinstance(old, dict) else {}, info["input"], info["input_sha256"])
    if message:
        print(f"dascreen dyecell: replacing the ranking in {target}: {message}", file=sys.stderr)


def _no_models_error(path: Path, pid: str, root: Path, out_dir: str | Path, meta: dict | None,
                     current_protocol: str | None) -> ConfigError:
    """The message for levels computed with a protocol that has no dye models in ``root``."""
    shipped = shipped_protocols(root)
    have = (f"the dye models in {root} are for protocol{'s' if len(shipped) > 1 else ''} {', '.join(shipped)}"
            if shipped else f"{root} holds no dye models")
    given = (read_inputs(out_dir).get("candidates") or {}).get("path") or (meta or {}).get("input") or ""
    internal = str((Path(out_dir) / "dyecell" / "candidates.csv").resolve())
    cands = given if given and given != internal else "CANDIDATES"
    refit = ("`dascreen dyecell --refit` computes the dye reference set with the current protocol and installs "
             "its models (use it only for a protocol you chose on purpose)")
    if current_protocol and current_protocol == pid:
        return ConfigError(f"{path} was computed with protocol {pid}, the current protocol, but {have}. {refit}; "
                           "or go back to a protocol with shipped models (undo the --set/--config changes of the "
                           "structures and electronic sections) and re-run the candidates")
    return ConfigError(
        f"{path} was computed with protocol {pid}, but {have}. Re-run the candidates with the current protocol: "
        f"`dascreen dyecell {cands} --out {out_dir}` (only the candidates are computed; molecules already in the "
        f"results store are not computed again). {refit[0].upper() + refit[1:]}")


def build_dye_table(path: str | Path, out_dir: str | Path, *, models_folder: str | Path | None = None,
                    models_root: str | Path | None = None, current_protocol: str | None = None,
                    cache: str | Path | None = None, reference: str | Path | None = None) -> tuple[pd.DataFrame, dict]:
    """The dye table of an input file, cached as ``out_dir/dyecell/dyes.csv`` (or ``cache``).

    ``current_protocol``: the protocol id of the command's configuration, for
    the message when the levels' protocol has no dye models.  ``reference``: the dye reference file the models must
    have been fitted on (``calibration.reference``'s ``dyes.csv``; None: not checked).  ``cache``: the
    table file instead of ``out_dir/dyecell/dyes.csv`` (:func:`run_dyecell`
    keeps another input's table out of the run's own).

    Returns
    -------
    (pandas.DataFrame, dict)
        The table (:data:`screen.dyecell.rank.DYE_COLUMNS`) and its sidecar
        content (input hash, models, protocol, calibration statistics).

    Raises
    ------
    ConfigError
        No dye models for the levels' protocol: names the protocol of the
        levels, those with models, and the fix (re-run the candidates, or refit).
    """
    path = Path(path)
    kind, frame, meta = read_input(path)
    target = Path(cache) if cache else Path(out_dir) / "dyecell" / "dyes.csv"
    info = {"input": str(path.resolve()), "input_sha256": sha256_file(path), "kind": kind,
            "levels_meta": meta, "dascreen": __version__, "versions": library_versions(),
            "table_rules": table_rules_hash()}
    if kind == "levels":
        pid = (meta or {}).get("protocol_id")
        if not pid and models_folder is None:
            raise InputError(f"{path} has no sidecar with the protocol id ({path}.meta.json); give the dye models "
                             "folder explicitly so that the calibration matches the computation")
        if models_folder is None and not all((Path(models_root or MODELS_DIR) / pid / f"{n}.json").is_file()
                                             for n in ("e_ox", "e00")):
            raise _no_models_error(path, pid, Path(models_root or MODELS_DIR), out_dir, meta, current_protocol)
        models = load_models(pid, models_root or MODELS_DIR, folder=models_folder, reference=reference)
        folder = Path(models_folder) if models_folder else Path(models_root or MODELS_DIR) / pid
        info["models"] = {"folder": str(folder), "protocol_id": pid,
                          **{n: sha256_file(folder / f"{n}.json") for n in models}}
        info["calibration"] = {n: {"features": m["model"]["features"], "coef": m["model"]["coef"],
                                   "intercept": m["model"]["intercept"], "n": m["n"], "loo_mae": m["loo_mae"],
                                   "baseline_loo_mae": m["baseline_loo_mae"], "unit": m["unit"],
                                   "target_range": m.get("target_range")} for n, m in models.items()}
        info["calibration"]["elements"] = models["e_ox"].get("elements", [])
        cached = _cached(target, info)
        table = cached if cached is not None else dye_table(frame, models)
    else:
        cached = _cached(target, info)
        table = cached if cached is not None else dyes_from_file(frame, str(path))
    if cached is None:
        write_csv(table, target)
        write_json(info, Path(f"{target}.meta.json"))
    return table, info


#: version of the rules that build a dye table other than the anchor patterns (rounding, the anchor column's
#: vocabulary): a change here or in :data:`screen.dyecell.anchors.ANCHORS` rebuilds a cached ``dyes.csv``
_TABLE_RULES = "3"
#: modules (paths under ``screen/``) whose code builds a dye table (:func:`screen.dyecell.rank.dye_table` and the
#: model code it calls): their text is part of the rule key, so a change of a rule nobody remembered to version
#: rebuilds the table (a metamorphic tester found a run folder's re-rank keeping the σ of an earlier rule, 0.125 V
#: against 0.183 V fresh); a rebuild costs only the models' application to the levels
_TABLE_CODE = ("dyecell/anchors.py", "dyecell/calibrate.py", "dyecell/checks.py", "dyecell/rank.py", "dyecell/stage.py",
               "calibration/linear.py", "calibration/domain.py", "viability.py")


def table_rules_hash() -> str:
    """Short hash of the anchor patterns, :data:`_TABLE_RULES` and the code of :data:`_TABLE_CODE` (the cached dye
    table's rule key).

    Examples
    --------
    >>> len(table_rules_hash())
    12
    """
    import hashlib

    from screen.dyecell.anchors import ANCHORS

    text = _TABLE_RULES + "\n" + "\n".join(f"{a.name}\t{a.smarts}" for a in ANCHORS)
    package = Path(__file__).resolve().parents[1]
    code = "\n".join(hashlib.sha256((package / name).read_bytes()).hexdigest() for name in _TABLE_CODE)
    return hashlib.sha256((text + "\n" + code).encode("utf-8")).hexdigest()[:12]


def _cached(target: Path, info: dict) -> pd.DataFrame | None:
    """The cached dye table when its sidecar matches the input, the models, the rules (anchor patterns,
    :func:`table_rules_hash`), and the dascreen and library versions (another version may read or check the
    input differently)."""
    side = Path(f"{target}.meta.json")
    if not (target.is_file() and side.is_file()):
        return None
    try:
        old = read_json(side)
    except ValueError:
        return None
    if old.get("input_sha256") != info["input_sha256"] or old.get("models") != info.get("models"):
        return None
    if old.get("dascreen") != info["dascreen"] or old.get("versions") != info["versions"]:
        return None
    if old.get("table_rules") != info.get("table_rules"):
        return None
    table = pd.read_csv(target, dtype={"id": str}, keep_default_na=False, na_values=[""])
    return table if list(table.columns) == DYE_COLUMNS else None


def settings_hash(settings: dict | None = None) -> str:
    """Short hash of the ``dyecell`` settings that shape a ranking (all but the oxide and the mediator).

    The defaults fill the missing keys and numbers are compared as numbers, so
    ``--set dyecell.target_pce_pct=8`` and the default 8.0 give the same hash
    (like :func:`screen.rank_io.settings_hash` of ``dascreen rank``).

    Examples
    --------
    >>> a = settings_hash({})
    >>> len(a), a == settings_hash({"oxide": "nio", "target_pce_pct": 8}), a == settings_hash({"voc_loss_v": 0.3})
    (8, True, False)
    """
    import hashlib
    import json

    section = {**option_defaults(), **(settings or {})}
    shaping = {k: (float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else v)
               for k, v in section.items() if k not in _NAMED_SETTINGS}
    text = json.dumps(shaping, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]


def ranking_folder(out_dir: str | Path, oxide: Material, mediator: Material, settings: dict | None = None,
                   tag: str = "") -> Path:
    """``out_dir/dyecell/<oxide slug>--<mediator slug>--<settings hash>`` (:func:`settings_hash`), ``--<tag>`` added
    for an input that is not the run's own levels (:func:`levels_tag`)."""
    name = f"{oxide.slug}--{mediator.slug}--{settings_hash(settings)}"
    return Path(out_dir) / "dyecell" / (f"{name}--{tag}" if tag else name)


def write_shortlist(ranking: pd.DataFrame, target: str | Path, size: int) -> dict:
    """The top passing dyes as an SD file (2-D depictions, estimates as properties).

    Returns
    -------
    dict
        ``written`` and ``skipped`` (ids without a readable SMILES).
    """
    from rdkit import Chem, rdBase
    from rdkit.Chem import rdDepictor

    from screen.io import atomic_path

    top = ranking[ranking["passes"].astype(bool)].head(int(size))
    written, skipped = 0, []
    with atomic_path(target) as tmp:
        writer = Chem.SDWriter(str(tmp))
        with rdBase.BlockLogs():
            for row in top.to_dict("records"):
                mol = Chem.MolFromSmiles(row["smiles"]) if row["smiles"] else None
                if mol is None:
                    skipped.append(row["id"])
                    continue
                rdDepictor.Compute2DCoords(mol)
                mol.SetProp("_Name", sd_text(row["id"], 80))  # the title line: 80 characters
                for prop in _SD_PROPS:  # data lines cut at 200 characters, the SMILES whole
                    mol.SetProp(prop, sd_text(row.get(prop), None if prop == "smiles" else SD_LINE_MAX))
                mol.SetProp("potential_scale", "V vs NHE")
                writer.write(mol)
                written += 1
        writer.close()
    return {"written": written, "skipped": skipped}


#: what ``e_ox_excited_v_nhe`` holds, by oxide type (``ranking.meta.json`` ``sign_convention``, the report)
EXCITED_COLUMN_MEANING = {
    "n": "e_ox_excited_v_nhe holds E(S+/S*) = E(S+/S) - E00/e, the excited-state oxidation potential",
    "p": ("e_ox_excited_v_nhe holds E(S/S-) ~ E(S+/S) - E00/e, the dye's estimated reduction potential (not "
          "E(S+/S*)); the injecting state E(S*/S-) is taken as E(S+/S)"),
}


def sign_convention(oxide_type: str) -> str:
    """The driving forces' definitions and what ``e_ox_excited_v_nhe`` holds, by oxide type (``ranking.meta.json``).

    Examples
    --------
    >>> print(sign_convention("p").split("; ")[-2])
    e_ox_excited_v_nhe holds E(S/S-) ~ E(S+/S) - E00/e, the dye's estimated reduction potential (not E(S+/S*))
    """
    p_type = oxide_type == "p"
    return (("drive_inj_ev = E(S+/S) - E_VB and drive_reg_ev = E_redox - E(S/S-) (p-type), in eV; " if p_type else
             "drive_inj_ev = E_CB - E(S+/S*) and drive_reg_ev = E(S+/S) - E_redox (n-type), in eV; ")
            + "both > 0 when the step is downhill (dG = -drive); " + EXCITED_COLUMN_MEANING["p" if p_type else "n"])


def _meta(ranking, table, info, oxide, mediator, model, options, short, notices=()) -> dict:
    from screen import __version__
    from screen.provenance import code_revision

    flags = pd.Series([f for s in ranking["flags"] for f in str(s).split(";") if f]).value_counts()
    status = table["status"].astype(str)
    threshold, threshold_source = model.reg_threshold_source(mediator, oxide)
    return {
        "dascreen": __version__, "code_revision": code_revision(), "stage": "dyecell",
        "scale": "electrochemical (potentials in V vs NHE)",
        "oxide": oxide.as_dict(), "mediator": mediator.as_dict(), "model": model.as_dict(),
        "regeneration_threshold_ev": threshold, "regeneration_threshold_source": threshold_source,
        "rank": asdict(options),
        "sign_convention": sign_convention(oxide.type),
        "e_ox_sources": value_sources(table[status.str.strip().str.lower().eq("ok")]),
        "e_ox_conversions": conversion_summary(ranking),
        "notices": list(notices),
        "dyes": {k: v for k, v in info.items() if k != "levels_meta"}, "levels_meta": info.get("levels_meta"),
        "calibration": info.get("calibration"),
        "flag_text": {code: describe(code, {"model": model.as_dict(),
                                            "regeneration_threshold_ev": threshold,
                                            "calibration": info.get("calibration") or {},
                                            "oxide": oxide.as_dict()})
                      for code in flags.index},
        "counts": {"rows": int(len(table)), "ok": int(status.eq("ok").sum()),
                   "rejected": int(status.eq("rejected").sum()), "failed": int(status.eq("failed").sum()),
                   "ranked": int(len(ranking)), "viable": int(ranking["viable"].astype(bool).sum()),
                   "passing": int(ranking["passes"].astype(bool).sum()),
                   "not_ranked": ranking.attrs.get("not_ranked", {}),
                   "flags": {str(k): int(v) for k, v in flags.items()}, "shortlist": short["written"],
                   "shortlist_skipped_no_smiles": short["skipped"]},
        "columns": RANKING_COLUMNS + EXTRA_COLUMNS,
        "outputs": {"ranking": "ranking.csv", "shortlist": "shortlist.sdf", "meta": "ranking.meta.json",
                    "report": "report.html", "safe": "ranking.safe.csv"},
    }


class DyeReportError(DascreenError, RuntimeError):
    """The dye-cell ranking is written (``ranking.meta.json`` records ``report: failed: ...``) but its report is not.

    A :class:`RuntimeError`, as :func:`screen.rank_io.run_rank`'s for a failed report, and a
    :class:`screen.errors.DascreenError` (exit 1), so that ``dascreen dyecell`` says it in one line.
    """


def run_dyecell(input_path: str | Path, out_dir: str | Path, *, oxide: str | None = None,
                mediator: str | None = None, settings: dict | None = None, models_folder: str | Path | None = None,
                models_root: str | Path | None = None, report: bool = True,
                current_protocol: str | None = None, reference: str | Path | None = None) -> Path:
    """Rank dyes for one oxide and one mediator and write the ranking folder.

    Parameters
    ----------
    input_path : path-like
        A run's ``levels.csv`` (its sidecar names the protocol) or a dye file.
    out_dir : path-like
        Output folder (``OUT``): writes ``OUT/dyecell/``.
    oxide, mediator : str, optional
        Library ids or one-row CSV files (default: ``settings`` or the
        ``dyecell`` defaults).
    settings : dict, optional
        The ``dyecell`` config section (model parameters and ranking options); missing keys take the defaults,
        an unknown key or a value the schema does not allow is refused (:class:`screen.errors.ConfigError`
        naming the field and the allowed ones).
    models_folder, models_root : path-like, optional
        Dye models (default ``models/dyecell/<protocol-id>``).
    report : bool
        Also write ``report.html`` and ``ranking.safe.csv``.
    current_protocol : str, optional
        Protocol id of the command's configuration (for the message when there are no dye models).
    reference : path-like, optional
        The dye reference file (or folder) the dye models must have been fitted on (the command passes
        ``calibration.reference``: dye models fitted on the shipped ``dyes.csv`` were used without a word for a
        reference folder of a lab's own dyes); None: not checked.

    Returns
    -------
    pathlib.Path
        ``ranking.csv`` of ``OUT/dyecell/<oxide>--<mediator>--<settings hash>/`` (:func:`ranking_folder`);
        ``…--levels-<file>-<hash>/`` when ``OUT`` holds a run and ``input_path`` is not its own levels
        (:func:`levels_tag`: the run's ranking and dye table stay as they are).

    Raises
    ------
    DyeReportError
        The report failed; the ranking files are written, ``ranking.meta.json`` last, with ``report``
        ``failed: <error>``.

    Notes
    -----
    A ranking folder that held a ranking of another input, or of this file
    before its content changed, is replaced with a notice on stderr.  The earlier
    ranking's files are removed before the new ones are written, and
    ``ranking.meta.json`` is written last (its presence means the ranking is
    complete); its ``report`` records what became of the report (``written``,
    ``failed: <error>``, ``off``), as in ``dascreen rank``.
    """
    section = {**option_defaults(), **(settings or {})}
    # the schema's dyecell section, as the command's config: a misspelt key (n_sample) was ignored without a word
    check_section("dyecell", section, "run_dyecell settings")
    ox = resolve_material("oxide", oxide or section["oxide"])
    med = resolve_material("mediator", mediator or section["mediator"])
    if ox.type_assumed:  # an oxide file without a type: said once per ranking, and in every reason naming the edge
        print(f"dascreen dyecell: {type_assumed_notice(ox)}", file=sys.stderr)
    notices = [n for n in (plausibility_notice(ox), plausibility_notice(med)) if n]
    for notice in notices:  # outside the library's range: ranked, but a sign slip is likely (also in the report)
        print(f"dascreen dyecell: {notice}", file=sys.stderr)
    model = DyeCellModel.from_mapping(section)
    thr, where = model.reg_threshold_source(med, ox)
    if med.kind == "file" and where == "default":  # a metamorphic tester: cu-tmby2 by file lost its own 0.10 eV
        print(f"dascreen dyecell: mediator file {mediator or section['mediator']} gives no min_drive_reg_ev, so the "
              f"general regeneration threshold {thr:.2f} eV applies (built-in couples may carry their own: 0.50 eV "
              "for iodide/triiodide, 0.10 eV for the copper ones); add a column min_drive_reg_ev to give this "
              "couple's", file=sys.stderr)
    options = RankOptions.from_mapping(section)
    tag = levels_tag(input_path, out_dir)
    cache = Path(out_dir) / "dyecell" / (f"dyes--{tag}.csv" if tag else "dyes.csv")
    table, info = build_dye_table(input_path, out_dir, models_folder=models_folder, models_root=models_root,
                                  current_protocol=current_protocol, cache=cache,
                                  reference=None if reference is None else reference_file(reference))
    ranking = rank_dyes(table, ox, med, model, options)
    target = ranking_folder(out_dir, ox, med, section, tag)
    _tell_replacing(target, info)
    # as `dascreen rank` (screen.rank_io.run_rank): the earlier ranking's meta, safe CSV, report and shortlist go
    # first, so a ranking stopped half way (a full disk, a kill) never leaves the old report beside the new ranking
    clear_previous_ranking(target)
    write_csv(ranking, target / "ranking.csv")
    short = write_shortlist(ranking, target / "shortlist.sdf", options.shortlist_size)
    meta = _meta(ranking, table, info, ox, med, model, options, short, notices)
    meta["settings_hash"] = settings_hash(section)
    meta["levels_tag"] = tag or None
    meta["dye_table"] = str(cache.resolve())
    failed, status = None, "off"
    if report:
        from screen.dyecell.page import write_dyecell_report

        try:
            write_dyecell_report(ranking, table, meta, target)
            status = "written"
        except Exception as exc:  # the ranking itself is complete: its meta is still written, then this is raised
            status = f"failed: {type(exc).__name__}: {exc}"
            failed = DyeReportError(f"the ranking is written to {target}, but the report failed: "
                                    f"{type(exc).__name__}: {exc}; fix that and run the same `dascreen dyecell` "
                                    "command again")
            failed.__cause__ = exc
    meta["report"] = status  # what became of report.html: "written", "failed: ..." or "off"
    write_json(meta, target / RANKING_META)  # last: its presence means the ranking is complete
    if failed is not None:
        raise failed
    return target / "ranking.csv"
