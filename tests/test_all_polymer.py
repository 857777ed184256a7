"""All-polymer blends (an audit by a chemist working on polymer donors with polymer acceptors).

- a partner file's ``acceptor_class`` column is used, as a candidate file's is (it was checked, then ignored: the
  pooled fill factor and the flag ``acceptor_class_unknown``);
- a ``smiles:`` partner is flagged ``is_partner`` on the candidate row of the same structure, as an ``id:`` partner;
- a dascreen shortlist SDF read back as candidates gives its polymers as repeat units, not as the capped oligomer
  the connection table draws.

Levels are those of the device set's row pm6-pyit-2020 (``models/reference/devices.csv``: PM6 −5.45 / −3.65 /
1.80 eV, PY-IT −5.71 / −3.84 / 1.40 eV, both recalled there) — a published pair, used as input only.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from screen.partners import Partner, resolve_partner
from screen.prepare import read_candidates
from screen.rank import rank_candidates

PM6 = {"id": "PM6ref", "homo_ev": -5.45, "lumo_ev": -3.65, "gap_opt_ev": 1.80, "scale": "film", "role": "donor"}
PYIT = "id,name,role,homo_ev,lumo_ev,gap_opt_ev,scale{cls}\npyit,PY-IT,acceptor,-5.71,-3.84,1.40,film{val}\n"


def _rank(partner: Partner) -> pd.Series:
    return rank_candidates(pd.DataFrame([PM6]), partner).set_index("id").loc["PM6ref"]


def test_a_partner_files_acceptor_class_is_used(tmp_path: Path) -> None:
    given = tmp_path / "pyit.csv"
    given.write_text(PYIT.format(cls=",acceptor_class", val=",Polymer"))
    plain = tmp_path / "pyit_plain.csv"
    plain.write_text(PYIT.format(cls="", val=""))
    with_class, without = resolve_partner(str(given)), resolve_partner(str(plain))
    assert with_class.acceptor_class == "polymer" and without.acceptor_class == ""
    a, b = _rank(with_class), _rank(without)
    assert a["acceptor_class"] == "polymer" and "acceptor_class_unknown" not in a["flags"]
    assert "acceptor_class_unknown" in b["flags"]
    # the class's own fill factor moves the estimate (the audit: 12.6 % pooled, 12.9 % as a polymer acceptor)
    assert a["pce_pct"] != b["pce_pct"]


def test_a_smiles_partner_is_recognised_among_the_candidates() -> None:
    unit = "*c1ccc(*)s1"
    partner = Partner(id=f"smiles:{unit}", name=unit, role="", homo_ev=-5.2, lumo_ev=-3.0, gap_opt_ev=2.0,
                      kind="smiles", smiles=unit)
    lv = pd.DataFrame([{**PM6, "id": "self", "smiles": unit},
                       {**PM6, "id": "other", "smiles": "*c1ccc(-c2ccc(*)s2)s1"}])
    flags = rank_candidates(lv, partner).set_index("id")["flags"]
    assert "is_partner" in flags["self"] and "is_partner" not in flags["other"]


def test_a_shortlist_polymer_reads_back_as_its_repeat_unit(tmp_path: Path) -> None:
    from rdkit import Chem
    from rdkit.Chem import AllChem

    dimer = Chem.AddHs(Chem.MolFromSmiles("c1ccc(-c2cccs2)s1"))  # the capped oligomer a shortlist holds
    AllChem.EmbedMolecule(dimer, randomSeed=1)
    dimer.SetProp("_Name", "KF-P99")
    dimer.SetProp("representation", "polymer")
    dimer.SetProp("smiles", "*c1ccc(*)s1")
    molecule = Chem.AddHs(Chem.MolFromSmiles("c1ccsc1"))
    AllChem.EmbedMolecule(molecule, randomSeed=1)
    molecule.SetProp("_Name", "KF-M01")
    molecule.SetProp("representation", "molecule")
    molecule.SetProp("smiles", "c1ccsc1")
    path = tmp_path / "shortlist.sdf"
    with Chem.SDWriter(str(path)) as writer:
        writer.write(dimer)
        writer.write(molecule)
    frame = read_candidates(path).set_index("id")
    assert frame.loc["KF-P99", "smiles_input"] == "*c1ccc(*)s1"
    assert Chem.CanonSmiles(frame.loc["KF-M01", "smiles_input"]) == "c1ccsc1"
