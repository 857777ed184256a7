"""Ranking stage, files in → files out: levels file + partner → ranking folder.

:func:`run_rank` reads a levels file, resolves the partner, ranks with
:func:`screen.rank.rank_candidates` and writes ``ranking.csv``, ``shortlist.sdf``,
``ranking.meta.json`` and (through :mod:`screen.report`) the report.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, Adv. Mater. 18 (2006) 789.
   :doi:`10.1002/adma.200501717`
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import math
import os
import stat
import sys
import time
from dataclasses import asdict
from pathlib import Path

import numpy as np
import pandas as pd

from screen.columns import SIGMA_COLUMNS
from screen.config import Config, nearest_existing
from screen.device import DeviceModel
from screen.devicepars import ACCEPTOR_CLASSES, device_tests
from screen.errors import InputError
from screen.io import SD_LINE_MAX, sd_text, text_cells
from screen.partners import Partner, PartnerError, resolve_partner
from screen.rank import (EXTRA_COLUMNS, RANKING_COLUMNS, RankOptions, partner_acceptor_class, partner_role,
                         rank_candidates)
from screen.rank_rows import shortlist_mask

__all__ = ["write_shortlist", "shortlist_notice", "longest_oligomers", "computed_geometries", "settings_hash",
           "ranking_folder", "levels_suffix", "set_aside_foreign", "read_ranked_levels", "check_before_computing",
           "run_rank", "check_writable", "clear_previous_ranking", "RANKING_FILES", "RANKING_META", "RANKING_REPORT"]


# --------------------------------------------------------------------------- outputs

_SD_PROPS = ["rank", "id", "name", "role", "partner", "homo_ev", "lumo_ev", "gap_opt_ev", "homo_sigma_ev",
             "lumo_sigma_ev", "gap_opt_sigma_ev", "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff",
             "pce_pct", "pce_sigma_pct", "p_above_target", "p_aligned", "passes", "flags", "representation",
             "chain_n_max", "chain_fit_quality", "truncated_groups", "smiles"]


def settings_hash(config) -> str:
    """Short hash of the settings that shape a ranking: the ``device`` and ``rank`` sections.

    Examples
    --------
    >>> a = settings_hash({})
    >>> len(a), a == settings_hash({"device": {"model": "scharber"}})
    (8, False)
    """
    cfg = Config.of(config)
    text = json.dumps({"device": cfg["device"], "rank": cfg["rank"]}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]


def ranking_folder(partner_slug: str, config) -> str:
    """Name of a ranking folder under ``OUT/rankings/``: ``<partner slug>--<settings hash>``.

    The partner in words (:func:`screen.partners.partner_slug`) and
    :func:`settings_hash`, so a ranking with other device or ranking settings
    gets its own folder (``docs/contracts.md`` §5).

    Examples
    --------
    >>> ranking_folder("y6", {}) == "y6--" + settings_hash({})
    True
    """
    return f"{partner_slug}--{settings_hash(config)}"


def levels_suffix(levels_path, out_dir) -> str:
    """Folder-name suffix of a ranking of another levels file than the run's own ``OUT/levels.csv``.

    A run folder's rankings belong to its levels: the workflow treats
    ``rankings/<partner>--<settings>/`` as the ranking of ``OUT/levels.csv``, so a
    ranking of another file (measured CV levels, an older run) written there would
    later be shown by ``dascreen run`` as the run's result.  Such a ranking gets
    ``--levels-<file stem>-<6 hex of the file's absolute path>``. A folder with a
    prepared batch (``work/candidates/prepared``) is a run folder before its
    ``levels.csv`` exists too (an interrupted run would otherwise replace the ranking when
    it goes on); a folder without a run keeps the plain names.

    Examples
    --------
    >>> import tempfile
    >>> run = Path(tempfile.mkdtemp()); _ = (run / "levels.csv").write_text("id")
    >>> levels_suffix(run / "levels.csv", run)
    ''
    >>> levels_suffix("/data/my cv.csv", run)[:15]
    '--levels-my-cv-'
    >>> levels_suffix("/data/my cv.csv", run / "empty")
    ''
    >>> (run / "empty" / "work" / "candidates" / "prepared").mkdir(parents=True)
    >>> levels_suffix("/data/my cv.csv", run / "empty")[:15]  # an unfinished run
    '--levels-my-cv-'
    """
    from screen.partners import file_tag

    own = Path(out_dir) / "levels.csv"
    run = own.is_file() or (Path(out_dir) / "work" / "candidates" / "prepared").is_dir()
    if not run or Path(levels_path).resolve() == own.resolve():
        return ""
    return "--" + file_tag(levels_path, limit=24)


def set_aside_foreign(out_dir, folder: str) -> str | None:
    """Move a run's ranking folder that holds the ranking of another levels file to its own name.

    Rankings written before :func:`levels_suffix` existed, or while the run had no
    ``levels.csv`` yet (interrupted), sit under the run's own folder name; ``dascreen run``
    calls this first, so that its workflow ranks the run's levels again instead of
    presenting the other file's ranking as its own (or replacing it). The new name is
    always a free one (``-earlier``, ``-earlier-2``, …), so no ranking is lost.
    Returns the new folder name, or None when nothing was moved.
    """
    out_dir = Path(out_dir)
    target = out_dir / "rankings" / folder
    meta = target / "ranking.meta.json"
    if not meta.is_file():
        return None
    from screen.io import read_json

    try:
        ranked = (read_json(meta).get("levels") or {}).get("path")
    except (OSError, ValueError, AttributeError):
        return None
    suffix = levels_suffix(ranked, out_dir) if ranked else ""
    if not suffix:  # the run's own levels, or not a run folder
        return None
    new = target.with_name(folder + suffix)
    n = 1
    while new.exists():  # later rankings of that file already have the name: keep every one
        new = target.with_name(f"{folder}{suffix}-earlier" + (f"-{n}" if n > 1 else ""))
        n += 1
    target.rename(new)
    return new.name


def _sdf_records(path: Path, wanted: set[str]) -> dict[str, str]:
    """Molblocks of the records of an SD file whose title is in ``wanted`` (no full parse).

    A record is the text between ``$$$$`` lines with its leading line breaks
    removed; its title is its first line, stripped; the first record of a
    title wins.  Only the title lines and the wanted records are copied out of
    the file's text (a run of 10 000 molecules has ~50 MB of them).

    Examples
    --------
    >>> import tempfile
    >>> sdf = Path(tempfile.mkdtemp()) / "shard-000.sdf"
    >>> _ = sdf.write_text("ma\\nA1\\n$$$$\\n mb \\nB1\\n$$$$\\nmb\\nB2\\n$$$$\\n")
    >>> _sdf_records(sdf, {"mb", "mc"})
    {'mb': ' mb \\nB1\\n'}
    """
    out = {}
    text = path.read_text(encoding="utf-8", errors="replace")
    start, size = 0, len(text)
    while start <= size:
        end = text.find("$$$$", start)
        end = size if end < 0 else end
        while start < end and text[start] in "\r\n":
            start += 1
        line_end = text.find("\n", start, end)
        title = text[start:end if line_end < 0 else line_end].strip()
        if title in wanted and title not in out:
            out[title] = text[start:end]
        start = end + 4
    return out


def _may_hold(sdf: Path, keys: set[str]) -> bool:
    """False only when the shard's status table rules out every key: the SD file need not be read.

    The structures stage writes ``shard-NNN.csv`` (one row per structure key,
    ``key`` column) right after ``shard-NNN.sdf`` (title = key) of the same
    shard.  A table that is missing, unreadable or older than the SD file rules
    out nothing.  Reading the 1 kB tables instead of every ~130 kB SD file is
    what a shortlist of 10 among 10 000 computed molecules needs.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> _ = (folder / "shard-000.sdf").write_text("ma\\n$$$$\\n")
    >>> _may_hold(folder / "shard-000.sdf", {"mb"})  # no table: read the SD file
    True
    >>> _ = (folder / "shard-000.csv").write_text("key,status\\nma,ok\\n")
    >>> _may_hold(folder / "shard-000.sdf", {"mb"}), _may_hold(folder / "shard-000.sdf", {"ma", "mb"})
    (False, True)
    """
    table = sdf.with_suffix(".csv")
    try:
        if table.stat().st_mtime_ns < sdf.stat().st_mtime_ns:
            return True
        text = table.read_text(encoding="utf-8", errors="replace")
    except OSError:
        return True
    return any(key in text for key in keys)


def computed_geometries(keys, levels_path: Path, meta_in: dict | None = None, config=None) -> dict:
    """3-D geometries (with hydrogens) of structure keys, as the structures stage computed them.

    Looked up in the run's structures SD files (``work/candidates/structures/``
    beside the levels file), then in the results store under the structures
    protocol recorded in the levels sidecar.

    Parameters
    ----------
    keys : iterable of str
        Structure keys.
    levels_path : path-like
        The levels file (its folder is the run's output folder).
    meta_in : dict, optional
        The levels sidecar (its ``protocol.structures`` selects store rows).
    config : screen.config.Config or mapping, optional
        For the store location (``store.path``).

    Returns
    -------
    dict
        ``{key: rdkit.Chem.Mol}`` for the keys found.
    """
    from rdkit import Chem, rdBase

    wanted = {k for k in keys if k}
    blocks: dict[str, str] = {}
    for sdf in sorted((Path(levels_path).parent / "work" / "candidates" / "structures").glob("shard-*.sdf")):
        if not wanted - set(blocks):
            break  # every geometry found: the first record of a key wins, later shards change nothing
        if _may_hold(sdf, wanted - set(blocks)):
            blocks.update(_sdf_records(sdf, wanted - set(blocks)))
    proto = ((meta_in or {}).get("protocol") or {}).get("structures")
    if wanted - set(blocks) and isinstance(proto, dict):
        from screen.store import earlier_structures_id, open_store, stage_protocol_id
        from screen.structures import idle_options

        pid, earlier = stage_protocol_id("structures", proto), earlier_structures_id(proto)
        try:
            store = open_store(Config.of(config))
            for key in sorted(wanted - set(blocks)) if store else []:
                rec = store.get("structures", key, pid)
                if rec is None and earlier != pid:  # stored under the earlier values of options idle for it
                    rec = store.get("structures", key, earlier)
                    computed = (rec or {}).get("smiles_computed")  # a record without it cannot be checked: unused
                    rec = rec if computed and idle_options((key, str(computed))) else None
                if rec and rec.get("molblock"):
                    blocks[key] = rec["molblock"]
        except Exception as exc:  # noqa: BLE001 - a store problem costs the 3-D geometry, not the ranking
            print(f"dascreen rank: results store not read: {exc}", file=sys.stderr)
    out = {}
    with rdBase.BlockLogs():
        for key, block in blocks.items():
            mol = Chem.MolFromMolBlock(block, removeHs=False)
            if mol is not None and mol.GetNumConformers():
                out[key] = mol
    return out


def _embedded(smiles: str):
    """A 3-D geometry with hydrogens made here (ETKDG + MMFF94) when none was computed; None if impossible, if
    the embedding fails :func:`screen.sanity.geometry_problems` or if the structure has more heavy atoms than the
    screen's limit (``PrepareOptions.max_heavy_atoms``, 200 by default: a 200-carbon chain took 10 s to embed, one of
    300 35 s, one of 3000 stalled the ranking): the shortlist then gets a 2-D depiction."""
    from rdkit import Chem, rdBase
    from rdkit.Chem import AllChem

    from screen.prepare import PrepareOptions
    from screen.report.drawings import drawable

    limit = PrepareOptions().max_heavy_atoms
    if not smiles or not drawable(smiles):
        return None
    with rdBase.BlockLogs():
        rough = Chem.MolFromSmiles(smiles, sanitize=False)
    if rough is not None and rough.GetNumHeavyAtoms() > limit:
        return None
    mol = Chem.MolFromSmiles(smiles) if smiles else None
    if mol is None or any(a.GetAtomicNum() == 0 for a in mol.GetAtoms()):
        return None
    mol = Chem.AddHs(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = 61453
    if AllChem.EmbedMolecule(mol, params) != 0:
        return None
    if AllChem.MMFFHasAllMoleculeParams(mol):
        AllChem.MMFFOptimizeMolecule(mol, maxIters=2000)
    from screen.sanity import geometry_problems

    if geometry_problems(mol):  # a broken embedding (a fullerene adduct's C-C at 2.5 A was exported): 2-D instead
        return None
    return mol


_GEOMETRY_WORDS = {"computed": "computed by the structures stage: the geometry the levels were computed on",
                   "oligomer": "polymer repeat unit: computed 3-D geometry of its longest oligomer (n = {n}, "
                               "structure key {key}), the longest chain its chain-limit levels were extrapolated "
                               "from",
                   "embedded": "no computed geometry found: embedded here with ETKDG and MMFF94, hydrogens added",
                   "2d": "2-D depiction: no 3-D geometry could be made",
                   "2d_polymer": "polymer repeat unit: 2-D drawing with * at its attachment points (no computed "
                                 "oligomer geometry was found beside the levels file, nor in the results store "
                                 "under the protocol of the levels file's .meta.json sidecar, where there is one)"}


def _shortlist_mol(row: dict, geometries: dict, keys: dict, oligomers: dict):
    """The molecule of one shortlist row, where its coordinates come from, its key and its oligomer.

    Returns
    -------
    tuple
        ``(mol or None, source, structure key, (n, oligomer key) or None)``;
        ``source`` is a key of :data:`_GEOMETRY_WORDS`.
    """
    from rdkit import Chem
    from rdkit.Chem import rdDepictor

    from screen.oligomers import count_attachments

    key = keys.get(row.get("smiles"), "")
    if key in geometries:
        return Chem.Mol(geometries[key]), "computed", key, None
    oligomer = oligomers.get(key)
    if oligomer is not None and oligomer[1] in geometries:
        return Chem.Mol(geometries[oligomer[1]]), "oligomer", key, oligomer
    mol = _embedded(row["smiles"])
    if mol is not None:
        return mol, "embedded", key, None
    mol = Chem.MolFromSmiles(row["smiles"]) if row["smiles"] else None
    if mol is not None:
        rdDepictor.Compute2DCoords(mol)
    return mol, "2d_polymer" if mol is not None and count_attachments(mol) else "2d", key, None


def _set_sd_props(mol, row: dict, scale: str, key: str, source: str, oligomer, context=None) -> None:
    """The SD properties of one shortlist record (title: the id cut to 80 characters)."""
    mol.SetProp("_Name", sd_text(row["id"], 80))  # the title line: 80 characters
    for prop in _SD_PROPS:  # data lines cut at 200 characters; the SMILES whole (a polymer is read back from it)
        mol.SetProp(prop, sd_text(row.get(prop), None if prop == "smiles" else SD_LINE_MAX))
    for prop, value in (context or {}).items():  # what the ranking was made with (p_above_target: above what)
        mol.SetProp(prop, sd_text(value))
    if scale:
        mol.SetProp("scale", scale)
    mol.SetProp("structure_key", key)
    n, okey = oligomer if oligomer is not None else ("", "")
    mol.SetProp("geometry_source", _GEOMETRY_WORDS[source].format(n=n, key=okey))
    if oligomer is not None:
        mol.SetProp("oligomer_n", str(n))
        mol.SetProp("oligomer_key", okey)


def write_shortlist(ranking: pd.DataFrame, target: str | Path, size: int, scale: str = "",
                    geometries: dict | None = None, keys: dict | None = None, oligomers: dict | None = None,
                    context: dict | None = None) -> dict:
    """Write the top passing rows as an SD file with 3-D geometries and hydrogens.

    Parameters
    ----------
    ranking : pandas.DataFrame
        From :func:`rank_candidates` (best first).
    target : path-like
        SD file, written atomically; not written when no record would be in
        it (no passing row, or none with a SMILES), and an earlier file at
        ``target`` is then removed (it belonged to another ranking).
    size : int
        Number of passing rows to write.
    scale : str
        Energy scale written as a property.
    geometries : dict, optional
        Computed geometries by structure key (:func:`computed_geometries`).
    keys : dict, optional
        Structure key by SMILES of the ranked rows.
    oligomers : dict, optional
        ``(n, structure key)`` of the longest computed oligomer by the
        structure key of a polymer repeat unit (:func:`longest_oligomers`).
    context : dict, optional
        Properties every record carries: what the ranking was made with (target PCE,
        device model), so that an SDF opened later says what ``p_above_target`` is above.

    Returns
    -------
    dict
        ``written`` (records), ``skipped`` (ids of shortlisted rows whose
        SMILES is missing or does not parse), ``shortlisted`` (passing rows
        considered) and ``geometry`` (records per source: ``computed``,
        ``oligomer``, ``embedded``, ``2d``).

    Notes
    -----
    Coordinates are the computed geometry of the structure key (the molecule the
    levels were computed on, side chains as computed); for a polymer repeat unit
    the computed geometry of its longest oligomer (SD properties ``oligomer_n``,
    ``oligomer_key``); else an ETKDG/MMFF94 embedding made here, else a 2-D
    depiction (a repeat unit's with ``*`` atoms); the ``geometry_source``
    property says which.  Levels, offsets and device estimates are SD
    properties.  The title line is the id with line breaks replaced by spaces,
    cut to 80 characters (the V2000 title-line width, from memory of the CTfile
    format); the full id is the ``id`` property.
    """
    from rdkit import Chem, rdBase

    from screen.io import atomic_path

    geometries, keys, oligomers = geometries or {}, keys or {}, oligomers or {}
    top = ranking[shortlist_mask(ranking)].head(int(size))
    skipped, sources, records = [], {"computed": 0, "oligomer": 0, "embedded": 0, "2d": 0}, []
    with rdBase.BlockLogs():
        for row in top.to_dict("records"):
            mol, source, key, oligomer = _shortlist_mol(row, geometries, keys, oligomers)
            if mol is None:
                skipped.append(row["id"])
                continue
            _set_sd_props(mol, row, scale, key, source, oligomer, context)
            records.append(mol)
            sources[source.removesuffix("_polymer")] += 1
    if records:
        # through a file object: RDKit takes a file name as UTF-8 text, which a folder name that is not UTF-8
        # (``--out $'lat\\xe9'``) is not (a traceback, "surrogates not allowed")
        with atomic_path(target) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
            writer = Chem.SDWriter(fh)
            for mol in records:
                writer.write(mol)
            writer.close()
    else:
        Path(target).unlink(missing_ok=True)
    return {"written": len(records), "skipped": skipped, "shortlisted": int(len(top)), "geometry": sources}


def shortlist_notice(short: dict, levels_path) -> str:
    """Why no ``shortlist.sdf`` was written ("" when it was).

    Examples
    --------
    >>> shortlist_notice({"written": 0, "shortlisted": 0, "skipped": []}, "L.csv")
    'no shortlist.sdf written: no candidate passes every check'
    >>> shortlist_notice({"written": 0, "shortlisted": 2, "skipped": ["a", "b"]}, "L.csv")  # doctest: +ELLIPSIS
    'no shortlist.sdf written: none of the 2 shortlisted rows (a, b) has a readable SMILES in L.csv; ...'
    >>> shortlist_notice({"written": 0, "shortlisted": 1, "skipped": ["a"]}, "L.csv")  # doctest: +ELLIPSIS
    'no shortlist.sdf written: the shortlisted row (a) has no readable SMILES in L.csv; ...'
    """
    if short["written"]:
        return ""
    if not short["shortlisted"]:
        return "no shortlist.sdf written: no candidate passes every check"
    ids = ", ".join(map(str, short["skipped"][:5])) + (", …" if len(short["skipped"]) > 5 else "")
    rows = (f"none of the {short['shortlisted']} shortlisted rows ({ids}) has a" if short["shortlisted"] > 1
            else f"the shortlisted row ({ids}) has no")
    return (f"no shortlist.sdf written: {rows} readable SMILES in {levels_path}; add a smiles column to get "
            "the structures")


def _oligomer_table(levels_path: Path, meta_in: dict | None) -> Path | None:
    """The per-n table of the polymers (``<levels>.oligomers.csv``): beside the levels file, else as recorded."""
    from screen.levels import sidecar_path

    beside = sidecar_path(levels_path)
    recorded = (meta_in or {}).get("oligomers")
    for cand in [beside] + ([Path(recorded), levels_path.parent / recorded] if recorded else []):
        if cand.is_file():
            return cand
    return None


def longest_oligomers(levels: pd.DataFrame, levels_path, meta_in: dict | None = None) -> dict:
    """The longest computed oligomer of each polymer row: ``{polymer key: (n, oligomer structure key)}``.

    Read from the levels file's per-n table (``levels.oligomers.csv``,
    ``docs/contracts.md`` §4): the largest finite n whose rows are all ``ok``.

    Parameters
    ----------
    levels : pandas.DataFrame
        The levels being ranked (``representation`` and ``key`` select the polymers).
    levels_path : path-like
        The levels file (the table is beside it, or where its sidecar says).
    meta_in : dict, optional
        The levels sidecar (its ``oligomers`` entry).

    Returns
    -------
    dict
        Empty without polymers or without the table.
    """
    if "representation" not in levels or "key" not in levels:
        return {}
    wanted = set(levels.loc[levels["representation"].astype(str).eq("polymer"), "key"].dropna().astype(str))
    path = _oligomer_table(Path(levels_path), meta_in) if wanted else None
    if path is None:
        return {}
    try:
        table = pd.read_csv(path, dtype={"polymer_key": str, "key": str, "status": str}, keep_default_na=False,
                            na_values=[""])
        n = pd.to_numeric(table["n"], errors="coerce")
        table = table[table["polymer_key"].isin(wanted) & np.isfinite(n) & table["key"].notna()].assign(n=n)
        done = table.groupby(["polymer_key", "n", "key"])["status"].agg(lambda s: bool(s.eq("ok").all()))
    except (OSError, ValueError, KeyError, pd.errors.ParserError) as exc:
        print(f"dascreen rank: {path} not read ({exc}); polymers get no oligomer geometry", file=sys.stderr)
        return {}
    out = {}
    for (polymer, n, key), ok in sorted(done.items()):
        if ok:
            out[polymer] = (int(n), key)  # sorted by n: the longest computed one stays
    return out


def _levels_meta(levels_path: Path) -> dict | None:
    from screen.io import read_json

    side = Path(f"{levels_path}.meta.json")
    if side.is_file():
        try:
            return read_json(side)
        except ValueError:
            return {"error": f"{side} is not valid JSON"}
    return None


def _models_from_meta(meta: dict | None, levels_path: Path) -> Path | None:
    """The calibration folder recorded in the levels sidecar, if it still exists."""
    folder = (meta or {}).get("models")
    if not folder:
        return None
    folder = Path(folder)
    for cand in ([folder] if folder.is_absolute() else [folder, levels_path.parent / folder]):
        if cand.is_dir():
            return cand.resolve()
    return None


def _calibration_stats(folder: Path | None) -> dict:
    """Leave-one-out statistics of the calibration models in ``folder`` (empty if unreadable)."""
    from screen.io import read_json

    out = {}
    if folder is None:
        return out
    for path in sorted(Path(folder).glob("*.json")):
        try:
            model = read_json(path)
        except ValueError:
            continue
        if isinstance(model, dict) and "loo_mae_ev" in model:
            out[path.stem] = {k: model.get(k) for k in ("n", "loo_mae_ev", "loo_rmse_ev", "scale")}
            out[path.stem].update(_sigma_range(model))
    return out


#: nearest-neighbour similarities at which the report quotes a model's σ: a close analogue and an outsider
SIGMA_SIMILARITIES = {"sigma_near_ev": 0.9, "sigma_far_ev": 0.2}


def _sigma_range(model: dict) -> dict:
    """σ [eV] of a model at :data:`SIGMA_SIMILARITIES` (the same twice for a constant variance); {} if unknown."""
    from screen.calibration.domain import domain_variance

    domain = model.get("domain") if isinstance(model.get("domain"), dict) else {}
    try:
        if domain.get("kind") == "similarity":
            return {k: math.sqrt(float(domain_variance(domain, s))) for k, s in SIGMA_SIMILARITIES.items()}
        sigma = float(model["model"]["residual_sigma_ev"]) if "model" in model else float(model["sigma_ev"])
    except (KeyError, TypeError, ValueError):
        return {}
    return dict.fromkeys(SIGMA_SIMILARITIES, sigma)


def _write_report(ranking, levels, partner, meta, out_dir, ranking_csv: str | None = None) -> str:
    """Call ``screen.report.write_report`` when that module exists; return what happened."""
    if importlib.util.find_spec("screen.report") is None:
        return "skipped: screen.report is not installed"
    import screen.report as report

    if not hasattr(report, "write_report"):
        return "skipped: screen.report has no write_report"
    try:
        report.write_report(ranking=ranking, levels=levels, partner=partner, meta=meta, out_dir=out_dir,
                            ranking_csv=ranking_csv)
    except Exception as exc:
        raise RuntimeError(f"the ranking is written to {out_dir}, but the report failed: "
                           f"{type(exc).__name__}: {exc}") from exc
    return "written"


def _partner(partner_spec: str, levels: pd.DataFrame, levels_path: Path, meta_in: dict | None, out_dir: Path,
             partner_levels) -> Partner:
    """Resolve the partner; a ``smiles:`` partner comes from its batch's levels file (same protocol)."""
    from screen.io import read_json
    from screen.partners import partner_kind, partner_levels_path

    if partner_kind(partner_spec) != "smiles":
        return resolve_partner(partner_spec, levels=levels)
    path = Path(partner_levels) if partner_levels is not None else partner_levels_path(partner_spec, out_dir)
    side = Path(f"{path}.meta.json")
    ran = (meta_in or {}).get("protocol_id")
    computed = read_json(side).get("protocol_id") if side.is_file() else None
    if ran and computed and ran != computed:
        raise PartnerError(
            f"partner {partner_spec!r} was computed with protocol {computed}, but the levels in {levels_path} were "
            f"computed with protocol {ran}; rank with the run's configuration (e.g. "
            f"{levels_path.parent / 'config.yaml'}) so that partner and candidates share one protocol")
    return resolve_partner(partner_spec, levels=levels, partner_levels=path)


def _rank_meta(ranking, levels, levels_path: Path, meta_in, partner: Partner, model: DeviceModel,
               options: RankOptions, short: dict, levels_sha: str) -> dict:
    """The content of ``ranking.meta.json`` (``levels_sha``: the levels file's SHA-256)."""
    from screen import __version__
    from screen.provenance import code_revision

    flags = pd.Series([f for s in ranking["flags"] for f in str(s).split(";") if f]).value_counts()
    status = (levels["status"].pipe(text_cells).str.strip().str.lower() if "status" in levels
              else pd.Series("ok", index=levels.index))
    levels_meta = dict(meta_in) if isinstance(meta_in, dict) else {}
    if levels_meta and "calibration" not in levels_meta:
        cal = _calibration_stats(_models_from_meta(meta_in, levels_path))
        if cal:
            levels_meta["calibration"] = cal
    return {
        "dascreen": __version__,
        "code_revision": code_revision(),
        "stage": "rank",
        "partner": partner.as_dict(),
        "partner_role": ranking.attrs["partner_role"],
        "partner_role_assumed": ranking.attrs["partner_role_assumed"],
        "scale": partner.scale,
        "device": model.as_dict(),
        "device_tests": device_tests(model.model, levels_meta.get("protocol_id"),
                                     calibration=levels_meta.get("calibration_models")),
        "rank": asdict(options),
        "filters": {"gap_min_ev": options.gap_min_ev, "gap_max_ev": options.gap_max_ev,
                    "max_heavy_atoms": options.max_heavy_atoms, "min_delta_lumo_ev": model.value("min_delta_lumo_ev"),
                    "min_delta_homo_ev": model.value("min_delta_homo_ev") if model.absorber == "both" else None,
                    "absorber": model.absorber, "model": model.model},
        "sign_convention": "delta_lumo_ev = LUMO_donor - LUMO_acceptor; delta_homo_ev = HOMO_donor - "
                           "HOMO_acceptor (both > 0 for a type-II heterojunction)",
        "levels": {"path": str(levels_path.resolve()), "sha256": levels_sha,
                   "rows": int(len(levels)),
                   "sidecar": f"{levels_path.name}.meta.json" if meta_in is not None else None},
        "levels_meta": levels_meta or None,
        "counts": {"rows": int(len(levels)), "ok": int(status.eq("ok").sum()),
                   "rejected": int(status.eq("rejected").sum()), "failed": int(status.eq("failed").sum()),
                   "ranked": int(len(ranking)), "passing": int(ranking["passes"].astype(bool).sum()),
                   "not_ranked": ranking.attrs["not_ranked"], "flags": {str(k): int(v) for k, v in flags.items()},
                   "shortlist": short["written"], "shortlisted_rows": short["shortlisted"],
                   "shortlist_skipped_no_smiles": short["skipped"],
                   "shortlist_geometry": short["geometry"]},
        "columns": RANKING_COLUMNS + EXTRA_COLUMNS,
        "outputs": {"ranking": "ranking.csv", "shortlist": "shortlist.sdf" if short["written"] else None,
                    "meta": "ranking.meta.json"},
        "shortlist_note": shortlist_notice(short, levels_path.name) or None,
    }


def _structure_keys(levels: pd.DataFrame) -> dict:
    """Structure key by SMILES of the computed rows of a levels table (empty without a key column)."""
    if "key" not in levels or "smiles" not in levels:
        return {}
    rows = levels[levels["key"].pipe(text_cells).str.len() > 0]
    return dict(zip(rows["smiles"].astype(str), rows["key"].astype(str)))


def _shortlist_keys(ranking: pd.DataFrame, keys: dict, options: RankOptions, oligomers: dict) -> list[str]:
    """Structure keys of the shortlisted rows, and of the longest oligomer of each polymer among them."""
    top = ranking[shortlist_mask(ranking)].head(int(options.shortlist_size))
    own = [keys.get(s, "") for s in top["smiles"]]
    return own + [oligomers[k][1] for k in own if k in oligomers]


def check_writable(target: Path, levels_path) -> None:
    """Refuse a ranking folder this process cannot write (or create), before anything is ranked or said.

    A read-only ranking folder got "replacing the ranking in …" and then "….ranking.csv.<x>.tmp: Permission
    denied" (an audit of unusual environments).

    Raises
    ------
    InputError
        Naming the folder that cannot be written and the fix.

    Examples
    --------
    >>> import tempfile
    >>> check_writable(Path(tempfile.mkdtemp()) / "rankings" / "y6--0", "levels.csv")
    """
    folder = nearest_existing(target)
    if not folder.is_dir():  # a file where a folder is needed gave NotADirectoryError/FileExistsError tracebacks
        raise InputError(f"cannot write the ranking {target}: {folder} is a file where a folder is needed; move it "
                         f"away, or rank into another folder (--out NEW_FOLDER --levels {levels_path})")
    for name in RANKING_FILES:  # a folder named ranking.csv gave an IsADirectoryError traceback
        path = Path(target) / name
        if path.is_dir():
            raise InputError(f"cannot write the ranking {target}: {path} is a folder where the file {name} goes; "
                             f"move it away, or rank into another folder (--out NEW_FOLDER --levels {levels_path})")
    if folder.is_dir() and not os.access(folder, os.W_OK | os.X_OK):
        what = "its folder" if folder == Path(target).absolute() else f"{folder}, where it would be created,"
        raise InputError(f"cannot write the ranking {target}: {what} is not writable; make it writable, or rank "
                         f"into a folder of your own (--out NEW_FOLDER --levels {levels_path})")


#: the files of a ranking folder, in the order :func:`run_rank` removes an earlier ranking's before it writes the
#: new one (``ranking.meta.json`` first, and written last: its presence means the ranking is complete)
RANKING_META, RANKING_REPORT = "ranking.meta.json", "report.html"
RANKING_FILES = (RANKING_META, "ranking.safe.csv", RANKING_REPORT, "shortlist.sdf", "ranking.csv")


def _signature(path: Path) -> tuple | None:
    """Size and modification time [ns] of a file, None when it is no file: what changes when another program writes
    it while it is read (cheaper than hashing the file a second time)."""
    try:
        st = path.stat()
    except OSError:
        return None
    return (st.st_size, st.st_mtime_ns) if stat.S_ISREG(st.st_mode) else None


def clear_previous_ranking(target: Path) -> None:
    """Remove the earlier ranking's files from ``target`` (not ``ranking.csv``: replaced atomically), so that a
    ranking stopped half way (a full disk) never leaves the old meta, safe CSV or report beside the new
    ``ranking.csv`` (an audit of full disks).

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> for name in RANKING_FILES: _ = (d / name).write_text("old")
    >>> clear_previous_ranking(d)
    >>> sorted(p.name for p in d.iterdir())
    ['ranking.csv']
    """
    for name in RANKING_FILES[:-1]:
        (target / name).unlink(missing_ok=True)


def _check_target(target: Path, partner: Partner, levels_path: Path, levels_sha: str) -> bool:
    """Refuse a folder that holds another partner's ranking; say so when a ranking of other levels is replaced.

    Parameters
    ----------
    target : pathlib.Path
        The ranking folder.
    partner : screen.partners.Partner
        The partner about to be ranked.
    levels_path : pathlib.Path
        The levels file about to be ranked.
    levels_sha : str
        Its SHA-256 (hex), compared with the one the folder's ``ranking.meta.json`` recorded.

    Returns
    -------
    bool
        True when the folder held a ranking whose levels had other content
        (another file's, or this file before it was edited; unknown counts as
        other): its numbers change, so a partner matrix that joins it must be
        refreshed.  False for a new folder or the same content.

    Raises
    ------
    ConfigError
        The folder holds the ranking against another partner (never overwritten).
    """
    meta_path = target / "ranking.meta.json"
    if not meta_path.is_file():
        if (target / "ranking.csv").is_file():  # an earlier ranking that stopped half way: its levels are unknown
            print(f"dascreen rank: replacing the incomplete ranking in {target} (it has no ranking.meta.json)",
                  file=sys.stderr)
            return True
        return False
    old = _folder_meta(target)
    _refuse_other_partner(target, partner, old)
    message, changed = _levels_change(old.get("levels") or {}, str(levels_path.resolve()), levels_sha)
    if message:
        print(f"dascreen rank: replacing the ranking in {target}: {message}", file=sys.stderr)
    return changed


def _folder_meta(target: Path) -> dict:
    """The ``ranking.meta.json`` of a ranking folder (``{}`` when missing or unreadable)."""
    from screen.io import read_json

    try:
        old = read_json(target / "ranking.meta.json")
    except (OSError, ValueError):
        return {}
    return old if isinstance(old, dict) else {}


def _refuse_other_partner(target: Path, partner: Partner, old: dict | None = None) -> None:
    """Refuse a ranking folder that holds the ranking against another partner (never overwritten).

    Raises
    ------
    ConfigError
        Naming the folder and both partners.
    """
    from screen.errors import ConfigError

    old = _folder_meta(target) if old is None else old
    if not old:
        return
    before = old.get("partner") or {}
    if (before.get("id"), before.get("kind")) != (partner.id, partner.kind):
        raise ConfigError(f"{target} holds the ranking against partner {before.get('id')!r}, not {partner.id!r}; "
                          "move it away or rank into another --out (a ranking is never overwritten by another "
                          "partner's)")


def _levels_change(old: dict, path: str, sha: str) -> tuple[str, bool]:
    """How the levels of a folder's earlier ranking differ from those about to be ranked.

    Parameters
    ----------
    old : dict
        ``levels`` of the earlier ``ranking.meta.json`` (``path``, ``sha256``).
    path, sha : str
        Resolved path and SHA-256 of the levels file about to be ranked.

    Returns
    -------
    tuple of (str, bool)
        The notice ("" when path and content are the same) and whether the
        content differs (so the numbers may change).

    Examples
    --------
    >>> _levels_change({"path": "/r/L.csv", "sha256": "ab" * 32}, "/r/L.csv", "ab" * 32)
    ('', False)
    >>> _levels_change({"path": "/r/L.csv", "sha256": "ab" * 32}, "/r/L.csv", "cd" * 32)
    ('/r/L.csv changed since it was ranked (sha256 abababab… → cdcdcdcd…)', True)
    >>> _levels_change({"path": "/r/old.csv", "sha256": "ab" * 32}, "/r/L.csv", "ab" * 32)
    ('it ranked /r/old.csv (same content)', False)
    """
    from screen.provenance import change_notice

    return change_notice(old.get("path"), old.get("sha256"), path, sha, "a levels file not recorded")


def read_ranked_levels(levels_path) -> pd.DataFrame:
    """Read a levels file to rank (its path kept in ``attrs['source']`` for the messages).

    Raises
    ------
    InputError
        The file is missing, lacks a column (:func:`screen.levels.read_levels`) or holds no row.
    """
    from screen.errors import InputError
    from screen.levels import read_levels

    levels = read_levels(levels_path)
    levels.attrs["source"] = str(levels_path)  # named in input errors (screen.levels_check)
    if not len(levels):
        raise InputError(f"levels file {levels_path} has a header but no rows: nothing to rank; add one row per "
                         "candidate (id,homo_ev,lumo_ev,gap_opt_ev,scale)")
    return levels


def check_before_computing(levels_path, partner_specs, config=None, *, out_dir=None,
                           partner_levels: dict | None = None) -> None:
    """Refuse what the ranking would refuse, before a ``smiles:`` partner is computed or any ranking is written.

    The levels file (no rows; impossible levels, ids, σ, scales, acceptor classes or roles:
    :func:`screen.rank.check_input_levels`); for every ``smiles:`` partner not yet computed, whether the
    candidates' roles or ``rank.role`` give it a role (it has none of its own) and whether ``config``'s
    protocol is the one the levels were computed with (their sidecar); every other partner (and a ``smiles:``
    partner whose levels file ``partner_levels`` names) is resolved and checked as :func:`run_rank` would:
    its role, its scale against the levels', its levels (:func:`screen.levels_check.check_partner`) and, with
    ``out_dir``, that its ranking folder holds no other partner's ranking. ``dascreen rank`` with several
    partners calls it before the first ranking, so a partner that cannot be ranked no longer leaves the
    rankings of the partners before it written (a new user's audit: ``--partner y6,c60,p_norole.csv`` wrote two
    rankings, then exited 2).

    Raises
    ------
    InputError, PartnerError, ScaleMismatchError, ConfigError
        As :func:`run_rank` would.
    """
    from screen.levels_check import check_partner
    from screen.partners import partner_kind
    from screen.rank import check_input_levels, check_scales
    from screen.rank_rows import split_ranked

    levels = read_ranked_levels(levels_path)
    check_input_levels(levels)  # the checks of rank_candidates, whatever the file came from
    cfg = Config.of(config)
    options = RankOptions.from_mapping(cfg["rank"])
    ranked, _ = split_ranked(levels)
    meta_in = _levels_meta(Path(levels_path))
    ran = (meta_in or {}).get("protocol_id")
    suffix = levels_suffix(levels_path, out_dir) if out_dir is not None else ""
    for spec in partner_specs:
        computed = (partner_levels or {}).get(spec)
        if partner_kind(spec) != "smiles" or computed is not None:
            partner = _partner(spec, levels, Path(levels_path), meta_in, Path(out_dir or "."), computed)
            partner_role(ranked, partner, options)
            if len(ranked):
                check_scales(ranked, partner)
                check_partner(partner)
            if out_dir is not None:
                _refuse_other_partner(Path(out_dir) / "rankings" / (ranking_folder(partner.slug, cfg) + suffix),
                                      partner)
            continue
        nan = float("nan")
        partner_role(ranked, Partner(id=spec.strip(), name=spec.strip(), role="", homo_ev=nan, lumo_ev=nan,
                                     gap_opt_ev=nan, kind="smiles", spec=spec), options)
        if ran and ran != cfg.protocol_id:
            raise PartnerError(
                f"partner {spec!r} would be computed with protocol {cfg.protocol_id}, but the levels in {levels_path} "
                f"were computed with protocol {ran}; rank with the run's configuration (e.g. "
                f"{Path(levels_path).parent / 'config.yaml'}) so that partner and candidates share one protocol")


def run_rank(levels_path, partner_spec: str, out_dir, config=None, *, partner_levels=None,
             report: bool = True, timings: dict | None = None, replaced: list | None = None) -> Path:
    """Rank a levels file against a partner and write the ranking folder.

    Parameters
    ----------
    levels_path : path-like
        ``OUT/levels.csv`` of a run or any levels file (a user's own
        measurements: ``id, homo_ev, lumo_ev, gap_opt_ev, scale`` at least).
        Its sidecar ``<levels>.meta.json`` is recorded when present.
    partner_spec : str
        See :func:`screen.partners.resolve_partner`.
    out_dir : path-like
        Output folder; results go to ``out_dir/rankings/<partner slug>--<settings hash>/``
        (:func:`ranking_folder`).
    config : screen.config.Config or mapping, optional
        Run configuration (sections ``device`` and ``rank``).
    partner_levels : path-like, optional
        Levels file of a ``smiles:`` partner's workflow batch; default
        :func:`screen.partners.partner_levels_path` under ``out_dir``.  Its
        protocol must be that of the levels being ranked.
    report : bool
        Call ``screen.report.write_report`` if that module is present.
    timings : dict, optional
        Filled with the wall seconds of each phase (for ``benchmarks/rerank.py``):
        ``read_s`` (levels file, checks, partner), ``rank_s``
        (:func:`rank_candidates`), ``export_s`` (``ranking.csv``, geometries,
        ``shortlist.sdf``) and ``report_s`` (0 without the report); ``ranking.meta.json``, written last, is in
        none of them.
    replaced : list, optional
        When the folder's ranking of other levels is replaced, its name is appended here and the partner
        matrices that join it are left to the caller (``dascreen rank`` with several partners refreshes them
        once, after ranking every partner); None refreshes them at once.

    Returns
    -------
    pathlib.Path
        Path of ``ranking.csv``.  Beside it: ``shortlist.sdf`` (top
        ``rank.shortlist_size`` passing rows; not written, with a notice on
        stderr, when none of them has a SMILES or none passes), ``ranking.meta.json`` (partner,
        device model, filters, levels provenance, counts) and, with the report
        module, ``report.html`` and ``ranking.safe.csv``.

    Raises
    ------
    ScaleMismatchError, PartnerError, InputError
        See :func:`rank_candidates` and :func:`screen.partners.resolve_partner`; a levels file without
        rows (:func:`read_ranked_levels`).
    ConfigError
        The ranking folder holds a ranking against another partner (never overwritten).
    RuntimeError
        The report module failed (the ranking files are written).

    Notes
    -----
    Only levels files are read: no quantum-chemistry engine is imported.

    The earlier ranking's files are removed before the new ``ranking.csv`` is written, and ``ranking.meta.json``
    is written last: a folder without it holds a ranking that stopped half way (``dascreen status`` says so).
    The levels file is hashed before and after it is read; a file that changed meanwhile is refused.

    A folder that holds this partner's ranking of other levels (another
    file, or this file before an edit: compared by SHA-256) is replaced with a
    notice on stderr, and every partner matrix that joins it is rebuilt
    (:func:`screen.matrix.refresh_matrices`; columns still ranked from the
    earlier levels are marked stale there).

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`
    """
    from screen.io import write_csv, write_json
    from screen.provenance import sha256_file

    clock = [time.perf_counter()]

    def lap(name: str) -> None:
        now = time.perf_counter()
        if timings is not None:
            timings[name] = now - clock[0]
        clock[0] = now

    cfg = Config.of(config)
    levels_path = Path(levels_path)
    out_dir = Path(out_dir)
    before = _signature(levels_path)  # missing: read_ranked_levels says so
    levels_sha = sha256_file(levels_path) if before else None
    levels = read_ranked_levels(levels_path)
    if _signature(levels_path) != before:  # the hash recorded must be that of the content ranked
        raise InputError(f"levels file {levels_path} changed while it was read (another program is writing it); "
                         "wait until it is finished, then rank again")
    meta_in = _levels_meta(levels_path)
    partner = _partner(partner_spec, levels, levels_path, meta_in, out_dir, partner_levels)
    check_writable(out_dir / "rankings" / (ranking_folder(partner.slug, cfg) + levels_suffix(levels_path, out_dir)),
                   levels_path)
    model = DeviceModel(**cfg["device"])
    options = RankOptions.from_mapping(cfg["rank"])
    lap("read_s")
    ranking = rank_candidates(levels, partner, model, options)
    lap("rank_s")

    _say_assumptions(levels, levels_path, partner, model, options)
    suffix = levels_suffix(levels_path, out_dir)
    target = out_dir / "rankings" / (ranking_folder(partner.slug, cfg) + suffix)
    if suffix and not target.exists():
        print(f"dascreen rank: {levels_path} is not this run's levels.csv: its ranking goes to "
              f"{target.relative_to(out_dir)} (the run's own rankings are untouched)", file=sys.stderr)
    was_replaced = _check_target(target, partner, levels_path, levels_sha)
    clear_previous_ranking(target)  # a ranking stopped half way leaves no earlier file beside the new ones
    csv_text = write_csv(ranking, target / "ranking.csv")
    csv_text = csv_text if os.linesep == "\n" else None  # the safe copy's text has "\n" line ends
    keys = _structure_keys(levels)
    oligomers = longest_oligomers(levels, levels_path, meta_in)
    geometries = computed_geometries(_shortlist_keys(ranking, keys, options, oligomers), levels_path, meta_in, cfg)
    context = {"target_pce_pct": options.target_pce_pct, "device_model": model.model, "absorber": model.absorber}
    short = write_shortlist(ranking, target / "shortlist.sdf", options.shortlist_size, partner.scale, geometries,
                            keys, oligomers, context)
    if not short["written"]:
        print(f"dascreen rank: {shortlist_notice(short, levels_path)}", file=sys.stderr)
    meta = _rank_meta(ranking, levels, levels_path, meta_in, partner, model, options, short, levels_sha)
    meta["settings_hash"] = settings_hash(cfg)
    lap("export_s")
    failed, status = None, "off"
    if report:
        try:
            status = _write_report(ranking, levels, partner.as_dict(), meta, target, csv_text)
        except RuntimeError as exc:  # the ranking itself is complete: its meta is still written, then this is said
            cause = exc.__cause__
            failed = exc
            status = f"failed: {type(cause).__name__}: {cause}" if cause is not None else f"failed: {exc}"
        if status != "written" and failed is None:
            print(f"dascreen rank: report {status}", file=sys.stderr)
    lap("report_s")
    # what became of report.html ("written", "skipped: ...", "failed: ...", "off"): `dascreen status` calls a
    # folder without it incomplete only when it was to be there (a ranking written without a report on purpose
    # was called incomplete, a maintainer's review)
    meta["report"] = status
    write_json(meta, target / RANKING_META)  # last: its presence means the ranking is complete
    if was_replaced and replaced is not None:  # the caller refreshes the matrices once all partners are ranked
        replaced.append(target.name)
    elif was_replaced:
        _refresh_matrices(out_dir, target.name)
    from screen.rank_index import write_ranking_index

    try:  # OUT/rankings-index.csv: what each ranking folder holds (never fails the ranking)
        write_ranking_index(out_dir)
    except (OSError, ValueError) as exc:
        print(f"dascreen rank: rankings-index.csv not written: {exc}", file=sys.stderr)
    if failed is not None:  # at the very end: the index and the partner matrices were left out before
        raise failed
    return target / "ranking.csv"


def _say_assumptions(levels: pd.DataFrame, levels_path: Path, partner: Partner, model: DeviceModel,
                     options: RankOptions | None = None) -> None:
    """On stderr: inputs taken as exact for want of σ, a partner that is no measured material, and a target PCE
    no pair can reach under the model."""
    # against an acceptor partner every pair has the partner's class: the bound of that class
    cls = partner_acceptor_class(partner) if partner.role == "acceptor" else ""
    if options is not None and options.target_pce_pct >= (bound := model.pce_bound_pct(cls or None)):
        pairs = f"any pair with {partner.id} (acceptor class {cls})" if cls else "any pair"
        print(f"dascreen rank: target {options.target_pce_pct:g} % PCE is above what the {model.model} device model "
              f"can give {pairs} (at most {bound:.1f} %, an upper bound, {_ceiling_why(model, cls)}), so "
              "P(PCE > target) is 0 for every row; give a lower --target-pce to compare candidates, or set device.eqe "
              "and device.ff to the values of your own best cells", file=sys.stderr)
    given = [c for c in SIGMA_COLUMNS if c in levels.columns]
    if len(levels) and not any((pd.to_numeric(levels[c], errors="coerce") > 0).any() for c in given):
        print(f"dascreen rank: {levels_path} gives no σ (homo_sigma_ev, lumo_sigma_ev, gap_opt_sigma_ev): its levels "
              "are taken as exact, so the ± and P(PCE > target) carry only the partner's σ", file=sys.stderr)
    if partner.kind == "file" and not any(getattr(partner, c) > 0 for c in SIGMA_COLUMNS):
        print(f"dascreen rank: partner file {partner.spec} gives no σ: its levels are taken as exact (the built-in "
              "partners carry ±0.1–0.3 eV); add homo_sigma_ev, lumo_sigma_ev, gap_opt_sigma_ev to include it",
              file=sys.stderr)
    if partner.role == "acceptor" and model.follows_class and not cls:  # a metamorphic tester: y6 by file, lost 0.4
        print(f"dascreen rank: partner {partner.spec or partner.id} gives neither a SMILES nor an acceptor_class, so "
              "the fitted model takes its pooled values (EQE and fill factor), not those of the acceptor's class (flag "
              f"acceptor_class_unknown); add a smiles or an acceptor_class column ({', '.join(ACCEPTOR_CLASSES)})",
              file=sys.stderr)
    if model.model == "scharber" and not partner.notes.startswith("NOT a measured material"):
        print(f"dascreen rank: device.model=scharber against {partner.id}: the published rule's 0.3 V loss goes "
              "with its reference acceptor's LUMO at -4.3 eV, about 0.4 eV deeper than the film/CV scale of real "
              f"partners, so its Voc runs high ({_scharber_bias()} on average over the project's published "
              "devices, models/device/fitted.json); compare candidates with it, do not read its Voc as a device's",
              file=sys.stderr)
    if (partner.kind == "library" and partner.notes.startswith("NOT a measured material")
            and model.model != "scharber"):  # reproducing the published model with its own reference is fine
        print(f"dascreen rank: partner {partner.id}: {'; '.join(partner.notes.split('; ')[:2]).rstrip('.')}",
              file=sys.stderr)  # the published model's reference level, on its own convention


def _ceiling_why(model: DeviceModel, acceptor_class: str = "") -> str:
    """Why the device model's PCE ceiling is where it is, naming whose EQE and fill factor it uses: the user's
    (``device.eqe`` / ``device.ff`` set), the published rule's own constants (Scharber), or the fitted averages of
    published devices (a maintainer's review: "averages of published devices" was said of all three).

    Examples
    --------
    >>> _ceiling_why(DeviceModel(model="scharber"))
    "with the published rule's EQE 0.65 and fill factor 0.65"
    >>> _ceiling_why(DeviceModel(model="scharber", eqe=0.8))
    "with the EQE 0.80 you set and the published rule's fill factor 0.65"
    >>> _ceiling_why(DeviceModel(eqe=0.8, ff=0.7))
    'with the EQE 0.80 and fill factor 0.70 you set'
    >>> _ceiling_why(DeviceModel(), "fullerene")
    "with its fullerene acceptors' EQE 0.48 and fill factor 0.58, averages of published devices, so its estimates run below the best measured cells"
    >>> _ceiling_why(DeviceModel(eqe=0.8), "fullerene")
    "with the EQE 0.80 you set and the fitted fullerene acceptors' fill factor 0.58"
    """
    eqe, ff = f"EQE {model.eqe_bound:.2f}", f"fill factor {model.ff_max:.2f}"
    if model.model != "scharber" and model.ff is None:
        ff = f"fill factor up to {model.ff_max:.2f}"  # the largest of the acceptor classes' fitted values
    whose = f"{acceptor_class} acceptors' " if acceptor_class else ""  # each value the class's only where it is
    if model.eqe_follows_class:
        eqe = (f"{whose}EQE {float(model.eqe_of([acceptor_class])[0]):.2f}" if whose
               else f"EQE up to {model.eqe_bound:.2f}")
    if whose and model.ff_follows_class:
        ff = f"{'' if model.eqe_follows_class else whose}fill factor {float(model.ff_of([acceptor_class])[0]):.2f}"
    source = "the published rule's" if model.model == "scharber" else "the fitted"
    mine = {"eqe": model.eqe is not None, "ff": model.ff is not None}
    if mine["eqe"] and mine["ff"]:
        return f"with the {eqe} and {ff} you set"
    if mine["eqe"] or mine["ff"]:
        (set_, other) = (eqe, ff) if mine["eqe"] else (ff, eqe)
        return f"with the {set_} you set and {source} {other}"
    if model.model == "scharber":
        return f"with the published rule's {eqe} and {ff}"
    return f"with its {eqe} and {ff}, averages of published devices, so its estimates run below the best measured cells"


def _scharber_bias() -> str:
    """The published rule's mean signed Voc error on the device set, as text (grouped CV, ``fitted.json``)."""
    from screen.devicepars import FITTED_PATH
    from screen.io import read_json

    try:
        return f"{float(read_json(FITTED_PATH)['cv']['scharber']['voc_bias_v']):+.2f} V"
    except (OSError, ValueError, KeyError, TypeError):
        return "by about 0.2 V"


def _refresh_matrices(out_dir: Path, folder: str) -> None:
    """Rebuild the partner matrices that join a ranking folder whose levels changed (:mod:`screen.matrix`)."""
    from screen.matrix import refresh_matrices

    refresh_matrices(out_dir, folder)
