"""Tests of screen.partners: library, the four partner forms, slugs, smiles: partners read from their batch."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest

from screen.partners import (
    LIBRARY_COLUMNS,
    LIBRARY_PATH,
    Partner,
    PartnerError,
    library_partners,
    library_table,
    load_library,
    partner_batch,
    partner_key,
    partner_kind,
    partner_slug,
    resolve_partner,
)


# --------------------------------------------------------------------------- library

def test_library_loads_with_sources_and_film_scale():
    lib = load_library()
    assert list(lib.columns[: len(LIBRARY_COLUMNS)]) == LIBRARY_COLUMNS
    assert len(lib) >= 2
    partners = library_partners()
    for pid, p in partners.items():
        assert p.source.strip(), f"{pid} has no source"
        assert p.scale == "film", f"{pid} is on scale {p.scale!r}"
        assert p.role in ("donor", "acceptor")
        assert p.homo_ev < p.lumo_ev < 0, f"{pid}: levels not bound / not ordered"
        assert min(p.homo_sigma_ev, p.lumo_sigma_ev, p.gap_opt_sigma_ev) >= 0
        assert p.slug == pid and re.fullmatch(r"[A-Za-z0-9._-]+", p.slug)
        assert resolve_partner(pid) == p


def test_scharber_reference_acceptor_entry():
    # Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717: the model's
    # acceptor sits at LUMO -4.3 eV (the value used for the design-rule map).  # from memory
    p = resolve_partner("scharber-reference-acceptor")
    assert p.role == "acceptor" and p.lumo_ev == pytest.approx(-4.3)
    assert p.doi == "10.1002/adma.200501717"


def test_library_ids_case_insensitive():
    first = next(iter(library_partners()))
    assert resolve_partner(first.upper()).id == first
    assert partner_slug(f"  {first.upper()} ") == first


def test_unknown_name_lists_library_ids():
    with pytest.raises(PartnerError) as err:
        resolve_partner("no-such-material")
    msg = str(err.value)
    assert "no-such-material" in msg
    for pid in library_partners():
        assert pid in msg
    assert "smiles:" in msg and "id:" in msg


def test_unknown_name_says_did_you_mean():
    with pytest.raises(PartnerError, match=r"Did you mean y6 \(acceptor\)\?"):  # no candidates: roles shown
        resolve_partner("y7")
    with pytest.raises(PartnerError, match="Did you mean scharber-reference-acceptor"):
        partner_kind("scharber-reference")
    with pytest.raises(PartnerError) as err:
        partner_kind("zzzzzzzz")
    assert "Did you mean" not in str(err.value)


def test_slugs_are_readable_and_distinct():
    from screen.partners import slugify

    assert slugify("My acceptor (batch 2)") == "My-acceptor-batch-2"
    slugs = {partner_slug(s) for s in ("id:KF D01", "id:KF-D01", "id:KF_D01", "smiles:c1ccsc1", "smiles:c1ccoc1")}
    assert len(slugs) == 5
    assert all(re.fullmatch(r"[A-Za-z0-9._-]+", s) for s in slugs)
    assert partner_slug("smiles:c1ccoc1").startswith("smiles-c1ccoc1-")  # furan: the SMILES shows


def test_split_partners_from_repeated_and_comma_options(tmp_path):
    from screen.partners import split_partners

    path = _one_row(tmp_path / "a,b.csv")  # a file name with a comma stays whole
    assert split_partners(["y6, c60", "c60", str(path)]) == ["y6", "c60", str(path)]


def test_library_table_columns():
    table = library_table()
    assert list(table.columns) == ["id", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "scale", "source"]
    assert len(table) == len(load_library())


def test_library_from_a_tmp_file(tmp_path):
    rows = [
        {"id": "acc-x", "name": "Acceptor X", "role": "acceptor", "homo_ev": "-6.0", "lumo_ev": "-4.0",
         "gap_opt_ev": "1.9", "scale": "film", "homo_sigma_ev": "0.1", "lumo_sigma_ev": "", "gap_opt_sigma_ev": "",
         "fc_reference_ev": "-4.8", "smiles": "", "source": "made up for this test", "doi": "",
         "from_memory": "false", "notes": ""},
    ]
    path = tmp_path / "lib.csv"
    pd.DataFrame(rows, columns=LIBRARY_COLUMNS).to_csv(path, index=False)
    p = resolve_partner("acc-x", library_path=path)
    assert (p.homo_ev, p.lumo_ev, p.lumo_sigma_ev, p.from_memory) == (-6.0, -4.0, 0.0, False)
    bad = pd.DataFrame(rows, columns=LIBRARY_COLUMNS).assign(scale="solution")
    bad.to_csv(path, index=False)
    with pytest.raises(PartnerError, match="scale"):
        load_library(path)


def test_library_is_read_once_per_file_version_and_each_call_gets_a_copy(tmp_path, monkeypatch):
    import screen.partner_library as lib

    path = tmp_path / "lib.csv"
    path.write_bytes(LIBRARY_PATH.read_bytes())
    shipped = load_library(LIBRARY_PATH)
    reads = []
    read = lib._read_library
    monkeypatch.setattr(lib, "_read_library", lambda p: reads.append(p) or read(p))
    first = load_library(path)
    first.loc[0, "id"] = "changed by the caller"
    assert load_library(path).loc[0, "id"] != "changed by the caller" and len(reads) == 1
    path.write_text(path.read_text(encoding="utf-8") + "\n", encoding="utf-8")  # a new version of the file
    assert load_library(path).equals(shipped) and len(reads) == 2


def test_real_library_file_is_the_default():
    assert LIBRARY_PATH.name == "partners.csv" and LIBRARY_PATH.parent.name == "data"


# --------------------------------------------------------------------------- file and id partners

def _one_row(path, **over):
    row = {"id": "my-acceptor", "homo_ev": -5.9, "lumo_ev": -4.0, "gap_opt_ev": 1.7, "scale": "film",
           "role": "acceptor", "lumo_sigma_ev": 0.05}
    row.update(over)
    pd.DataFrame([row]).to_csv(path, index=False)
    return path


def test_one_row_file_partner(tmp_path):
    path = _one_row(tmp_path / "My Acceptor (CV).csv")
    assert partner_kind(str(path)) == "file"
    p = resolve_partner(str(path))
    assert (p.id, p.role, p.lumo_ev, p.lumo_sigma_ev, p.homo_sigma_ev, p.kind) == \
        ("my-acceptor", "acceptor", -4.0, 0.05, 0.0, "file")
    assert re.fullmatch(r"file-My-Acceptor-CV-[0-9a-f]{8}", p.slug), p.slug
    # same file, same slug; another file of the same name elsewhere, another slug
    assert partner_slug(str(path)) == p.slug
    other = tmp_path / "sub"
    other.mkdir()
    assert partner_slug(str(_one_row(other / path.name))) != p.slug


def test_file_partner_with_two_rows_is_refused(tmp_path):
    path = tmp_path / "two.csv"
    pd.DataFrame([{"id": "a", "homo_ev": -5.9, "lumo_ev": -4.0, "gap_opt_ev": 1.7, "scale": "film"},
                  {"id": "b", "homo_ev": -5.8, "lumo_ev": -3.9, "gap_opt_ev": 1.7, "scale": "film"}]
                 ).to_csv(path, index=False)
    with pytest.raises(PartnerError, match="has 2 rows; a partner file holds exactly one"):
        resolve_partner(str(path))


def test_file_partner_needs_scale_and_levels(tmp_path):
    with pytest.raises(PartnerError, match="scale"):
        resolve_partner(str(_one_row(tmp_path / "a.csv", scale="")))
    with pytest.raises(PartnerError, match="no lumo_ev"):
        resolve_partner(str(_one_row(tmp_path / "b.csv", lumo_ev="")))
    with pytest.raises(PartnerError, match="role"):
        resolve_partner(str(_one_row(tmp_path / "c.csv", role="sensitiser")))


@pytest.mark.parametrize("over, message", [
    (dict(gap_opt_ev="inf"), r"line 2 \(id 'my-acceptor'\), column gap_opt_ev = inf: not a finite number"),
    (dict(gap_opt_ev=""), r"line 2: row 'my-acceptor' has no gap_opt_ev; a partner needs HOMO, LUMO and optical gap"),
    (dict(gap_opt_ev=0.3), r"column gap_opt_ev = 0.3: the optical gap \(0.3 eV\) is more than 1.0 eV below"),
    (dict(id=""), r"line 2, column id = '': empty"),
    (dict(scale="cv"), r"column scale = 'cv': allowed: film or gas"),
])
def test_file_partner_gets_the_checks_of_a_levels_file(tmp_path, over, message):
    with pytest.raises(PartnerError, match=message):
        resolve_partner(str(_one_row(tmp_path / "acc.csv", **over)))


@pytest.mark.parametrize("smiles, reason", [
    ("[*]c1cc([*])cc([*])c1", "attachment_too_many"),
    ("[*]c1ccsc1", "attachment_single"),
    ("[Na+].[Cl-]", "multi_fragment"),
    ("c1ccccc1.CCO", "multi_fragment"),
    ("[U]", "unsupported_element"),
])
def test_smiles_partner_gets_the_reasons_of_the_prepare_stage(smiles, reason):
    with pytest.raises(PartnerError, match=rf"cannot be computed: .*\(reason {reason}\)") as err:
        partner_key("smiles:" + smiles)
    assert "open-shell" not in str(err.value)
    assert partner_key("smiles:[*]c1ccc([*])s1")[0] == "*c1ccc(*)s1"  # a repeat unit with two ends is fine


def test_id_partner_from_levels():
    levels = pd.DataFrame({"id": ["D1", "A 7\nx", "bad"], "status": ["ok", "ok", "failed"],
                           "error": ["", "", "electronic: no SCF"],
                           "homo_ev": [-5.3, -5.8, np.nan], "lumo_ev": [-3.4, -4.0, np.nan],
                           "gap_opt_ev": [1.7, 1.6, np.nan], "scale": ["film", "film", ""],
                           "role": ["donor", "acceptor", ""], "lumo_sigma_ev": [0.2, 0.15, np.nan]})
    p = resolve_partner("id:A 7\nx", levels=levels)
    assert (p.id, p.role, p.lumo_ev, p.lumo_sigma_ev, p.kind) == ("A 7\nx", "acceptor", -4.0, 0.15, "id")
    # readable: the id itself when path-safe, else its slug plus a short hash (never the raw text)
    assert p.slug == "id-A-7-x-" + p.slug.rsplit("-", 1)[1] and re.fullmatch(r"id-A-7-x-[0-9a-f]{6}", p.slug)
    assert resolve_partner("id:D1", levels=levels).slug == "id-D1"
    with pytest.raises(PartnerError, match="no row with id 'nope'"):
        resolve_partner("id:nope", levels=levels)
    with pytest.raises(PartnerError, match="status 'failed'"):
        resolve_partner("id:bad", levels=levels)
    with pytest.raises(PartnerError, match="no levels table"):
        resolve_partner("id:D1")


def test_partner_dict_is_json_safe():
    p = Partner("x", "X", "", -6.0, -4.0, float("nan"))
    json.dumps(p.as_dict(), allow_nan=False)


# --------------------------------------------------------------------------- smiles partners

#: hand-made calibration in the format of screen.calibrate.fit_all (numbers invented for the test)
def _partner_batch_levels(tmp_path, spec="smiles:C1=CSC=C1", **over):
    """A levels file as the workflow's partner batch writes it (one row + sidecar)."""
    from screen.partners import partner_levels_path

    path = partner_levels_path(spec, tmp_path)
    path.parent.mkdir(parents=True)
    row = {"id": "smiles:c1ccsc1", "smiles": "c1ccsc1", "status": "ok", "error": "", "ip_ev": 8.9, "ea_ev": -0.3,
           "gap_fund_ev": 9.2, "homo_ev": -5.8123, "lumo_ev": -2.1456, "gap_opt_ev": 3.4567, "ip_sigma_ev": 0.2,
           "ea_sigma_ev": 0.3, "homo_sigma_ev": 0.25, "lumo_sigma_ev": 0.35, "gap_opt_sigma_ev": 0.15,
           "scale": "film", "xtb_ip_ev": 13.86489, "xtb_ea_ev": 3.46310, "role": "", "name": ""}
    row.update(over)
    pd.DataFrame([row]).to_csv(path, index=False)
    meta = {"protocol_id": "tblite-gfn2-ff-00000000", "models": "/m/tblite-gfn2-ff-00000000"}
    path.with_name("levels.csv.meta.json").write_text(json.dumps(meta))
    return path


def test_smiles_partner_read_from_its_batch_levels(tmp_path):
    spec = "smiles:C1=CSC=C1"  # thiophene, written non-canonically
    path = _partner_batch_levels(tmp_path, spec)
    assert path.parent.name == partner_batch(spec) == "partner-" + partner_key(spec)[1]
    p = resolve_partner(spec, partner_levels=path)
    assert p.kind == "smiles" and p.id == "smiles:c1ccsc1" and p.name == "c1ccsc1" and p.role == ""
    assert p.slug == partner_slug(spec) == f"smiles-c1ccsc1-{partner_key(spec)[1][1:7]}"
    assert (p.homo_ev, p.lumo_ev, p.gap_opt_ev, p.scale) == (-5.8123, -2.1456, 3.4567, "film")
    assert (p.homo_sigma_ev, p.lumo_sigma_ev, p.gap_opt_sigma_ev) == (0.25, 0.35, 0.15)
    assert p.source == "computed: protocol tblite-gfn2-ff-00000000, calibration /m/tblite-gfn2-ff-00000000"
    assert p.notes == f"structure key {partner_key(spec)[1]}; raw xTB IP 13.865 eV, EA 3.463 eV"


def test_smiles_partner_not_computed_or_failed(tmp_path):
    from screen.partners import partner_levels_path

    with pytest.raises(PartnerError, match="has not been computed"):
        resolve_partner("smiles:c1ccsc1", partner_levels=partner_levels_path("smiles:c1ccsc1", tmp_path))
    with pytest.raises(PartnerError, match="computed by the workflow"):
        resolve_partner("smiles:c1ccsc1")
    path = _partner_batch_levels(tmp_path, status="failed", error="electronic: SCF did not converge")
    with pytest.raises(PartnerError, match="calculation failed: electronic: SCF did not converge"):
        resolve_partner("smiles:c1ccsc1", partner_levels=path)


def test_partners_module_never_touches_the_engine():
    """A smiles: partner is computed by the workflow; partners.py imports no compute module."""
    import ast

    import screen.partners

    tree = ast.parse(open(screen.partners.__file__, encoding="utf-8").read())
    imported = {node.module for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)}
    imported |= {a.name for node in ast.walk(tree) if isinstance(node, ast.Import) for a in node.names}
    assert not imported & {"screen.engines", "screen.structures", "screen.electronic", "screen.calibrate"}


def test_smiles_partner_bad_smiles():
    with pytest.raises(PartnerError, match="does not parse"):
        partner_slug("smiles:C1CC")
    with pytest.raises(PartnerError, match="charge"):
        partner_slug("smiles:[NH4+]")


def test_smiles_partner_must_share_the_candidates_protocol(tmp_path):
    from screen.rank_io import run_rank

    path = _partner_batch_levels(tmp_path)
    levels = tmp_path / "levels.csv"
    pd.DataFrame([{"id": "D1", "homo_ev": -5.2, "lumo_ev": -3.0, "gap_opt_ev": 1.8, "scale": "film",
                   "role": "donor", "smiles": "c1ccccc1"}]).to_csv(levels, index=False)
    (tmp_path / "levels.csv.meta.json").write_text(json.dumps({"protocol_id": "tblite-gfn2-xtb-11111111"}))
    with pytest.raises(PartnerError, match="computed with protocol tblite-gfn2-ff-00000000"):
        run_rank(levels, "smiles:c1ccsc1", tmp_path, {}, report=False)
    (tmp_path / "levels.csv.meta.json").write_text(json.dumps({"protocol_id": "tblite-gfn2-ff-00000000"}))
    ranking = pd.read_csv(run_rank(levels, "smiles:c1ccsc1", tmp_path, {}, partner_levels=path, report=False))
    assert ranking["partner"].tolist() == ["smiles:c1ccsc1"]


@pytest.mark.parametrize("smiles, said", [
    ("CC[Fe]", "element(s) not allowed: Fe"),
    ("C1=CC", "(reason unparsable)"),
    ("C[N+](C)(C)C", "(reason charged)"),
])
def test_the_smiles_of_a_partner_file_is_checked_like_a_smiles_partner(tmp_path, smiles, said):
    # `smiles = CC[Fe]` was accepted and the partner classed nfa-other
    path = tmp_path / "mine.csv"
    path.write_text(f"id,homo_ev,lumo_ev,gap_opt_ev,scale,role,smiles\nP1,-5.6,-3.9,1.5,film,acceptor,{smiles}\n",
                    encoding="utf-8")
    with pytest.raises(PartnerError) as err:
        resolve_partner(str(path))
    text = str(err.value)
    assert f"partner file {path}: line 2, column smiles = {smiles!r}: " in text and said in text
    path.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role,smiles\nP1,-5.6,-3.9,1.5,film,acceptor,c1ccsc1\n",
                    encoding="utf-8")
    assert resolve_partner(str(path)).smiles == "c1ccsc1"


def test_the_partner_file_smiles_is_refused_by_the_command_before_ranking(tmp_path, capsys):
    from screen.cli import main

    levels = _one_row(tmp_path / "lv.csv")
    bad = tmp_path / "p.csv"
    bad.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role,smiles\nP1,-5.6,-3.9,1.5,film,acceptor,CC[Fe]\n",
                   encoding="utf-8")
    assert main(["rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--partner", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "column smiles = 'CC[Fe]'" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists()


def test_did_you_mean_keeps_to_a_role_or_names_each_role():
    from screen.partners import did_you_mean, unknown_partner

    assert did_you_mean("pcdtbx") == ["pcdtbt", "idtbr"]
    assert did_you_mean("pcdtbx", role="acceptor") == ["idtbr"]
    assert "Did you mean pcdtbt (donor) or idtbr (acceptor)?" in str(unknown_partner("pcdtbx"))
    text = str(unknown_partner("pcdtbx", role="acceptor"))
    assert "Did you mean idtbr? (only acceptors are named: the candidates are donors)" in text


def test_a_huge_partner_name_is_not_echoed_in_full():
    with pytest.raises(PartnerError) as err:
        partner_kind("z" * 100_000)
    assert len(str(err.value)) < 1500 and "(100000 characters)" in str(err.value)


def test_a_macrocycle_partner_is_refused_within_the_time_limit(monkeypatch):
    # RDKit's aromaticity perception of a [16]cycloparaphenylene takes ~20 s here and grows tenfold per two rings;
    # a smiles: partner is checked by the prepare stage's guard before RDKit's own parse, so the run is refused in
    # about the time limit instead of hanging before it starts
    from screen.partners import _canonical_key
    from screen.prepare import checks

    monkeypatch.setattr(checks, "RING_PERCEPTION_LIMIT_S", 2.0)
    hoop = "c1cc2ccc1" + "-c1ccc(cc1)" * 14 + "-c1ccc-2cc1"
    with pytest.raises(PartnerError, match="ring_perception_time"):
        _canonical_key(hoop)
