"""Tests of screen.config / screen.schema / screen.options: one validated Config, schema-sourced defaults."""

from __future__ import annotations

import dataclasses
import json

import pytest

from screen.config import Config, load_config, protocol_id, section_defaults
from screen.errors import ConfigError


def _defaults_of(cls) -> dict:
    out = {}
    for f in dataclasses.fields(cls):
        if f.default is not dataclasses.MISSING:
            out[f.name] = f.default
        elif f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
            out[f.name] = f.default_factory()  # type: ignore[misc]
    return out


def _comparable(value):
    return list(value) if isinstance(value, tuple) else value


#: every options dataclass and its schema section (module, class, section)
OPTIONS_CLASSES = [("screen.options", "StructureOptions", "structures"),
                   ("screen.options", "ElectronicOptions", "electronic"),
                   ("screen.options", "ExecutionOptions", "execution"),
                   ("screen.prepare", "PrepareOptions", "prepare"),
                   ("screen.rank", "RankOptions", "rank"),
                   ("screen.device", "DeviceModel", "device")]


@pytest.mark.parametrize("module,name,section", OPTIONS_CLASSES, ids=[c[1] for c in OPTIONS_CLASSES])
def test_options_defaults_equal_schema_defaults(module, name, section):
    """The schema is the single source of defaults: every options dataclass agrees with it."""
    import importlib

    cls = getattr(importlib.import_module(module), name)
    schema = section_defaults(section)
    fields = _defaults_of(cls)
    shared = set(schema) & set(fields)
    assert shared, f"{cls.__name__} shares no field with schema section {section}"
    for key in sorted(shared):
        assert _comparable(fields[key]) == schema[key], f"{cls.__name__}.{key}"
    # every schema key is a field (a key the dataclass ignores would be a silent no-op)
    assert set(schema) <= set(fields), f"{cls.__name__} lacks {sorted(set(schema) - set(fields))}"


def test_config_validates_once_and_exposes_typed_sections():
    cfg = Config.of({"structures": {"geometry": "xtb"}, "electronic": {"threads": 2}})
    assert cfg.structures.geometry == "xtb" and cfg.electronic.threads == 2 and cfg.execution.isolate is True
    assert cfg["device"]["eqe"] == section_defaults("device")["eqe"]
    assert Config.of(cfg) is cfg
    assert cfg.protocol_id == protocol_id(cfg.to_dict())
    assert cfg.protocol_id is cfg.protocol_id  # computed once
    # threads change the speed, not the numbers: same protocol
    assert cfg.protocol_id == Config.of({"structures": {"geometry": "xtb"}}).protocol_id


def test_config_errors_name_source_field_and_allowed_values(tmp_path):
    with pytest.raises(ConfigError, match=r"myrun.yaml: field levels.scale: .*allowed values: film, gas"):
        Config.of({"levels": {"scale": "solid"}}, "myrun.yaml")
    bad = tmp_path / "bad.yaml"
    bad.write_text("- just\n- a list\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="must hold a mapping"):
        load_config(bad)
    with pytest.raises(ConfigError, match="not valid JSON"):
        Config.from_json("{nope", "job")


def test_overrides_and_paths_make_new_objects():
    base = Config.of({})
    changed = base.with_overrides({"rank": {"role": "donor"}})
    assert changed["rank"]["role"] == "donor" and base["rank"]["role"] is None
    moved = base.with_paths(lambda p: f"/x/{p}")
    assert moved["calibration"]["models"] == "/x/models" and base["calibration"]["models"] == "models"
    assert moved.protocol_id == base.protocol_id


def test_sections_are_json_copies():
    cfg = Config.of({})
    text = json.dumps(cfg.sections("prepare", "structures"), sort_keys=True)
    assert set(json.loads(text)) == {"prepare", "structures"}
    cfg.sections("prepare")["prepare"]["shard_size"] = -1
    assert cfg["prepare"]["shard_size"] == section_defaults("prepare")["shard_size"]


def test_loading_config_does_not_load_numpy():
    """A stage job sets its thread count after reading the config, before numpy or the engine load."""
    import subprocess
    import sys

    code = "import sys, screen.stages, screen.config; print(int('numpy' in sys.modules))"
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True).stdout.strip() == "0"


@pytest.mark.parametrize("text, field", [
    ("rank:\n  target_pce_pct: .nan\n", "rank.target_pce_pct"),
    ("rank:\n  gap_min_ev: .nan\n", "rank.gap_min_ev"),
    ("dyecell:\n  target_pce_pct: .nan\n", "dyecell.target_pce_pct"),
    ("device:\n  eqe: .nan\n", "device.eqe"),
    ("rank:\n  gap_max_ev: .inf\n", "rank.gap_max_ev"),
])
def test_numbers_that_are_not_finite_are_refused_naming_the_field(tmp_path, text, field):
    # NaN passes every minimum/maximum of the schema: target nan % gave P(PCE > target) = 0 for every row
    path = tmp_path / "nan.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError, match=f"{path}: field {field}: .* is not a finite number"):
        load_config(path)
    section, key = field.split(".")
    with pytest.raises(ConfigError, match=f"field {field}: (nan|-?inf) is not a finite number"):
        Config.of({section: {key: float("nan") if "nan" in text else float("inf")}})
    with pytest.raises(ConfigError, match="not a finite number"):  # a job's JSON configuration too
        Config.from_json(json.dumps({section: {key: float("nan")}}))


def test_a_config_file_that_is_not_utf8_or_not_yaml_is_one_line_naming_it(tmp_path):
    binary = tmp_path / "bin.yaml"
    binary.write_bytes(b"rank:\n  seed: 1\n\xff\xfe\n")
    with pytest.raises(ConfigError) as err:
        load_config(binary)
    assert str(err.value) == (f"{binary}: the config file is not UTF-8 text (byte 0xff at position 16); save it as "
                              "UTF-8 (a YAML file of fields, see `dascreen config --yaml`)")
    broken = tmp_path / "broken.yaml"
    broken.write_text("rank: [1\n", encoding="utf-8")
    with pytest.raises(ConfigError) as err:
        load_config(broken)
    assert "\n" not in str(err.value) and "not valid YAML at line 2" in str(err.value)


def test_the_xtb_python_engine_is_refused_with_settings_it_cannot_do():
    # an engine audit: with the defaults, engine xtb returned NaN film IP/EA on rows marked ok and skipped the
    # nitrogen lone-pair rule (pyridine's raw IP 13.71 against 15.01 eV with tblite on the same geometry)
    from screen.options import ElectronicOptions

    with pytest.raises(ConfigError, match="film_epsilon=null.*lone_pair_homo=aufbau"):
        ElectronicOptions(engine="xtb")
    with pytest.raises(ConfigError, match="solvent=null"):
        ElectronicOptions(engine="xtb", film_epsilon=None, lone_pair_homo="aufbau", solvent="water")
    ok = ElectronicOptions(engine="xtb", film_epsilon=None, lone_pair_homo="aufbau")
    assert ok.engine == "xtb"
    with pytest.raises(ConfigError, match="electronic.engine=xtb"):
        Config.of({"electronic": {"engine": "xtb"}}).electronic


def test_a_calibration_of_another_engine_is_not_compared_by_version():
    # the message told a user of engine xtb (xtb-python 22.1) to "install xtb 0.8.x", tblite's version
    from screen.preflight import calibration_differences

    cfg = Config.of({"electronic": {"engine": "xtb", "film_epsilon": None, "lone_pair_homo": "aufbau"}})
    _, diffs = calibration_differences(cfg)
    keys = [d.field for d in diffs]
    assert "electronic.engine" in keys and "engine_version" not in keys
