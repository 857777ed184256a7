"""Run configuration: one JSON schema, defaults filled, one clear error.

The schema ``screen/workflow/schemas/config.schema.yaml`` is the single source
of every option and its default; the Snakefile validates against the same file.
"""

from __future__ import annotations

import copy
import hashlib
import json
from functools import lru_cache
from pathlib import Path

import jsonschema
import yaml

__all__ = ["SCHEMA_PATH", "ConfigError", "load_config", "resolve", "defaults", "section_defaults", "protocol",
           "protocol_id"]

SCHEMA_PATH = Path(__file__).parent / "workflow" / "schemas" / "config.schema.yaml"


from screen.errors import ConfigError  # noqa: E402  (re-exported: the error lives on the ground floor)


@lru_cache(maxsize=1)
def _schema() -> dict:
    return yaml.safe_load(SCHEMA_PATH.read_text(encoding="utf-8"))


def _fill_defaults(node: dict, schema: dict) -> None:
    for name, sub in schema.get("properties", {}).items():
        if name not in node and "default" in sub:
            node[name] = copy.deepcopy(sub["default"])
        if isinstance(node.get(name), dict) and sub.get("type") == "object":
            _fill_defaults(node[name], sub)


def _describe(error: jsonschema.ValidationError) -> str:
    field = ".".join(str(p) for p in error.absolute_path) or "(top level)"
    schema = error.schema if isinstance(error.schema, dict) else {}
    allowed = ""
    if "enum" in schema:
        allowed = f"; allowed values: {', '.join(map(str, schema['enum']))}"
    elif error.validator == "additionalProperties":
        props = sorted(error.schema.get("properties", {}))
        allowed = f"; allowed fields: {', '.join(props)}"
    return f"field {field}: {error.message}{allowed}"


def resolve(config: dict | None, source: str = "configuration") -> dict:
    """Validate ``config`` and return a copy with every default filled in.

    Parameters
    ----------
    config : dict or None
        Partial configuration.
    source : str
        Where it came from, for the error message (a file name).

    Raises
    ------
    ConfigError
        Naming ``source``, the field and the allowed values.

    Examples
    --------
    >>> cfg = resolve({"device": {"eqe": 0.5}})
    >>> cfg["device"]["eqe"], cfg["device"]["ff"]
    (0.5, 0.65)
    >>> resolve({"device": {"absorber": "acceptor"}})
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: configuration: field device.absorber: 'acceptor' is not one of ['donor', 'both']; allowed values: donor, both
    """
    cfg = copy.deepcopy(config or {})
    schema = _schema()
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(cfg), key=lambda e: list(e.absolute_path))
    if errors:
        raise ConfigError(f"{source}: " + "; ".join(_describe(e) for e in errors))
    _fill_defaults(cfg, schema)
    errors = sorted(validator.iter_errors(cfg), key=lambda e: list(e.absolute_path))
    if errors:  # a default that breaks the schema is a bug here, still say it clearly
        raise ConfigError(f"{source} (after defaults): " + "; ".join(_describe(e) for e in errors))
    return cfg


def section_defaults(section: str) -> dict:
    """Defaults of one schema section: the single source of an options dataclass's defaults.

    Examples
    --------
    >>> section_defaults("prepare")["min_shards"]
    4
    """
    return copy.deepcopy(defaults()[section])


def defaults() -> dict:
    """The complete default configuration."""
    return resolve({})


def load_config(path: str | Path | None = None, overrides: dict | None = None) -> dict:
    """Read a YAML config file, apply ``overrides`` (nested dict), validate.

    Raises
    ------
    ConfigError
        Unreadable file or invalid content (message names the file and field).
    """
    cfg: dict = {}
    source = "configuration"
    if path is not None:
        source = str(path)
        try:
            cfg = yaml.safe_load(Path(path).read_text(encoding="utf-8")) or {}
        except (OSError, yaml.YAMLError) as exc:
            raise ConfigError(f"{path}: cannot read the config file: {exc}") from exc
        if not isinstance(cfg, dict):
            raise ConfigError(f"{path}: the config file must hold a mapping of fields, not {type(cfg).__name__}")
    _merge(cfg, overrides or {})
    return resolve(cfg, source)


def _merge(base: dict, extra: dict) -> None:
    for key, value in extra.items():
        if isinstance(value, dict) and isinstance(base.get(key), dict):
            _merge(base[key], value)
        else:
            base[key] = copy.deepcopy(value)


def protocol(config: dict) -> dict:
    """The settings that determine the computed numbers (structures + electronic).

    Partner, device and ranking settings are deliberately absent: changing them
    must never invalidate the quantum chemistry or the calibration.
    """
    cfg = resolve(config)
    electronic = {k: v for k, v in cfg["electronic"].items() if k != "threads"}
    return {"structures": cfg["structures"], "electronic": electronic}


def protocol_id(config: dict) -> str:
    """Short readable id of the protocol, e.g. ``tblite-gfn2-ff-1a2b3c4d``.

    Examples
    --------
    >>> protocol_id({}).startswith("tblite-gfn2-ff-")
    True
    """
    proto = protocol(config)
    digest = hashlib.sha256(json.dumps(proto, sort_keys=True).encode()).hexdigest()[:8]
    el = proto["electronic"]
    method = el["method"].lower().replace("-xtb", "")
    solv = f"-{el['solvent']}" if el["solvent"] else ""
    return f"{el['engine']}-{method}-{proto['structures']['geometry']}{solv}-{digest}"
