"""Hostile configuration files and partner ids (a security audit): a YAML alias bomb, deep nesting, folder names
that differ only in case. Each is refused in one line (exit 2), fast and in bounded memory, or kept apart."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from screen.cli import main
from screen.config import Config, read_config_file
from screen.errors import ConfigError
from screen.schema import check_section, resolve

REPO = Path(__file__).resolve().parent.parent


def _bomb_text(levels: int = 6, under: str = "rank:\n  seed: ") -> str:
    """A "billion laughs" config: ``levels`` levels of nine aliases (9**6 = 531 441 values once written out; the
    audit's file had nine levels, 9**9)."""
    names = "abcdefghijk"[:levels]
    lines = ["x:", f'  {names[0]}: &{names[0]} [{", ".join(["lol"] * 9)}]']
    for before, name in zip(names, names[1:]):
        lines.append(f"  {name}: &{name} [{', '.join([f'*{before}'] * 9)}]")
    return "\n".join(lines) + f"\n{under}*{names[-1]}\n"


def _shared_bomb(levels: int = 6):
    """The same in Python: a few dozen objects, 9**levels values once written out."""
    value = ["lol"] * 9
    for _ in range(levels - 1):
        value = [value] * 9
    return value


def _cli(capsys, *args):
    rc = main(list(args))
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


@pytest.fixture
def levels(tmp_path):
    path = tmp_path / "lv.csv"
    path.write_text("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
                    "KF-D01,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n", encoding="utf-8")
    return path


def _one_line(err: str, *words: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and len(lines[0]) < 1000, (len(lines), len(err), err[:300])
    assert "Traceback" not in err and all(w in lines[0] for w in words), lines[0]
    return lines[0]


# --------------------------------------------------------------------------- aliases

def test_an_alias_bomb_in_a_config_file_is_refused_in_one_line(levels, tmp_path, capsys):
    bomb = tmp_path / "bomb.yaml"
    bomb.write_text(_bomb_text(), encoding="utf-8")
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--partner", "y6",
                      "--config", str(bomb))
    assert rc == 2
    _one_line(err, str(bomb), "alias *a", "line 3")


def test_an_alias_bomb_in_a_run_folders_config_is_refused_in_one_line(levels, tmp_path, capsys):
    # OUT/config.yaml is read by `dascreen rank --out` when no --config is given (a folder a collaborator sent)
    out = tmp_path / "recv"
    out.mkdir()
    (out / "levels.csv").write_text(levels.read_text(encoding="utf-8"), encoding="utf-8")
    (out / "config.yaml").write_text(_bomb_text(), encoding="utf-8")
    rc, _, err = _cli(capsys, "rank", "--out", str(out), "--partner", "y6")
    assert rc == 2
    _one_line(err, str(out / "config.yaml"), "alias")


def test_an_anchor_without_an_alias_and_an_inline_merge_key_still_read(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text("device: &d\n  eqe: 0.7\nrank:\n  <<: {seed: 3}\n", encoding="utf-8")
    assert read_config_file(path) == {"device": {"eqe": 0.7}, "rank": {"seed": 3}}


def test_a_merge_key_with_an_alias_is_refused(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text("base: &b {seed: 3}\nrank:\n  <<: *b\n", encoding="utf-8")
    with pytest.raises(ConfigError, match=r"line 3: the YAML alias \*b"):
        read_config_file(path)


def test_an_alias_bomb_as_the_candidates_of_a_run_folder_is_refused_in_one_line(tmp_path):
    # `dascreen run CANDIDATES --out OUT` reads the candidate file OUT/config.yaml names (9**9 values: killed after
    # 90 s at 4 GB; 9**6 here: a message of 4 MB)
    from screen.preflight import check_out

    out = tmp_path / "recv"
    out.mkdir()
    (out / "config.yaml").write_text(_bomb_text(under="candidates: "), encoding="utf-8")
    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nA1,c1ccsc1\n", encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        check_out(out, candidates)
    assert len(str(caught.value)) < 1000 and "alias" in str(caught.value)


def test_a_shared_value_from_python_is_refused_by_its_size_in_one_line():
    # Config.of and --set (a flow value may hold its own anchors) reach resolve without the file loader
    with pytest.raises(ConfigError) as caught:
        Config.of({"rank": {"seed": _shared_bomb()}})
    assert len(str(caught.value)) < 300 and "field rank.seed: too large a value" in str(caught.value)
    with pytest.raises(ConfigError) as caught:
        check_section("rank", {"seed": _shared_bomb()}, "RankOptions")
    assert len(str(caught.value)) < 300 and "RankOptions: field rank.seed: too large" in str(caught.value)


def test_an_alias_bomb_in_a_set_value_is_refused_in_one_line(levels, tmp_path, capsys):
    names = "abcdef"
    flow = [f"&a [{', '.join(['lol'] * 9)}]"] + [f"&{n} [{', '.join([f'*{b}'] * 9)}]"
                                                 for b, n in zip(names, names[1:])]
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--partner", "y6",
                      "--set", f"rank.seed=[{', '.join(flow)}]")
    assert rc == 2
    _one_line(err, "--set rank.seed=", "the YAML alias *a")


def test_a_long_value_is_shortened_in_the_schema_message():
    with pytest.raises(ConfigError) as caught:
        resolve({"rank": {"seed": ["lol"] * 5000}})
    text = str(caught.value)
    assert len(text) < 300 and text.startswith("configuration: field rank.seed: ['lol', 'lol',") and "..." in text


def test_a_value_given_for_two_settings_is_written_without_aliases_and_reads_back(tmp_path):
    # copy.deepcopy kept the one dict of two sections one object: both sections' defaults went into it
    # (refused "after defaults"), and yaml.safe_dump writes a shared value as an anchor and an alias, which a
    # config file may not hold (a run writes OUT/config.yaml with yaml.safe_dump of the configuration)
    shared = {}
    cfg = Config.of({"rank": shared, "device": shared})
    assert cfg.to_dict() == Config.of({}).to_dict()
    path = tmp_path / "config.yaml"
    text = yaml.safe_dump(cfg.to_dict(), sort_keys=False)
    assert "&id" not in text and "*id" not in text
    path.write_text(text, encoding="utf-8")
    assert read_config_file(path) == cfg.to_dict() and Config.load(path).protocol_id == cfg.protocol_id


# --------------------------------------------------------------------------- nesting

@pytest.mark.parametrize("text", ["rank: " + "[" * 50_000 + "]" * 50_000 + "\n",
                                  "rank:\n" + "".join(f"{'  ' * (i + 1)}k{i}:\n" for i in range(3000))
                                  + "  " * 3001 + "v: 1\n"],
                         ids=["lists", "mappings"])
def test_deep_nesting_in_a_config_file_is_refused_in_one_line(levels, tmp_path, capsys, text):
    deep = tmp_path / "deep.yaml"
    deep.write_text(text, encoding="utf-8")
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--partner", "y6",
                      "--config", str(deep))
    assert rc == 2
    _one_line(err, str(deep), "nested too deeply")


def test_deep_nesting_from_python_and_json_is_refused():
    deep: dict = {}
    node = deep.setdefault("rank", {})
    for i in range(3000):
        node = node.setdefault(f"k{i}", {})
    with pytest.raises(ConfigError, match=r"field rank\.k0\.k1\.\.\.: nested too deeply"):
        Config.of(deep)
    with pytest.raises(ConfigError, match="nested too deeply"):
        Config.from_json('{"rank": ' + "[" * 100_000 + "]" * 100_000 + "}")


def test_a_value_that_holds_itself_is_refused():
    loop: list = []
    loop.append(loop)
    with pytest.raises(ConfigError, match="field rank.seed: the value holds itself"):
        Config.of({"rank": {"seed": loop}})


# --------------------------------------------------------------------------- what the project ships

def test_every_yaml_the_project_ships_reads_as_before():
    from screen.config import load_yaml

    # the files of the repository (results/ is a run's output, not the project's: git-ignored)
    files = [REPO / "config" / "config.yaml", REPO / "screen" / "workflow" / "schemas" / "config.schema.yaml",
             REPO / "profiles" / "local-generic" / "config.yaml", REPO / "profiles" / "slurm" / "config.yaml"]
    for path in files:
        text = path.read_text(encoding="utf-8")
        assert load_yaml(text) == yaml.safe_load(text), path


# --------------------------------------------------------------------------- partner folders

def test_id_partner_folders_never_differ_only_in_case():
    from screen.partners import partner_slug

    specs = ["id:KF-a08", "id:kf-A08", "id:KF-A08", "id:kf-a08", "id:Kf-a08"]
    slugs = [partner_slug(s) for s in specs]
    assert len({s.lower() for s in slugs}) == len(specs), slugs


def test_id_partner_folders_in_capitals_keep_their_names():
    # the folder names of ids without a lower-case letter do not change: earlier rankings stay where they are
    from screen.partners import partner_slug

    assert [partner_slug(s) for s in ("id:KF-D01", "id:LD-01", "id:D1", "id:123")] == \
        ["id-KF-D01", "id-LD-01", "id-D1", "id-123"]


def test_two_id_partners_that_differ_in_case_rank_into_two_folders(tmp_path, capsys):
    levels = tmp_path / "lv.csv"
    levels.write_text("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
                      "KF-a08,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n"
                      "kf-A08,c1ccc(-c2ccco2)s1,-5.90,-3.95,1.95,film,acceptor\n", encoding="utf-8")
    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "id:KF-a08",
                "--partner", "id:kf-A08")[0] == 0
    folders = [p.name.split("--")[0] for p in (out / "rankings").iterdir() if not p.name.startswith("matrix--")]
    assert len(folders) == 2 and len({f.lower() for f in folders}) == 2, folders


def test_a_hostile_profile_is_refused_in_one_line(tmp_path):
    # a workflow-engine profile may use anchors (read with yaml.safe_load), but an executor that is no name was
    # written out whole (a 34 MB message from an alias bomb) and a deep file gave a RecursionError traceback
    from screen.preflight import check_profile

    bomb = tmp_path / "bomb"
    bomb.mkdir()
    lines = ["a0: &a0 [x, x, x, x, x, x, x, x, x]"]
    lines += [f"a{i}: &a{i} [{', '.join([f'*a{i - 1}'] * 9)}]" for i in range(1, 7)]
    (bomb / "config.yaml").write_text("\n".join(lines) + "\nexecutor: *a6\n", encoding="utf-8")
    with pytest.raises(ConfigError, match=r"executor is a list; write its name, e.g. `executor: slurm`") as err:
        check_profile(str(bomb))
    assert len(str(err.value)) < 300
    deep = tmp_path / "deep"
    deep.mkdir()
    (deep / "config.yaml").write_text("executor: " + "[" * 50000 + "]" * 50000 + "\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="cannot be read: nested too deeply"):
        check_profile(str(deep))
