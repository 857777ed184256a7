"""The configuration schema: validation, defaults and one clear error.

``screen/workflow/schemas/config.schema.yaml`` is the single source of every
option, its allowed values and its default; the Snakefile validates against
the same file.  This module only reads the schema: the run's configuration
object is :class:`screen.config.Config`, and the options dataclasses
(:mod:`screen.options` and the stage modules) take their defaults from
:func:`section_defaults`.
"""

from __future__ import annotations

import copy
import dataclasses
import math
import re
from collections.abc import Mapping
from functools import lru_cache
from pathlib import Path

import jsonschema
import yaml

from screen.errors import ConfigError

__all__ = ["SCHEMA_PATH", "ConfigError", "resolve", "defaults", "section_defaults", "non_finite", "non_finite_text",
           "check_section", "check_options", "shape_problem", "MAX_NESTING", "MAX_VALUES"]

SCHEMA_PATH = Path(__file__).parent / "workflow" / "schemas" / "config.schema.yaml"


@lru_cache(maxsize=1)
def _schema() -> dict:
    return yaml.safe_load(SCHEMA_PATH.read_text(encoding="utf-8"))


def _fill_defaults(node: dict, schema: dict) -> None:
    for name, sub in schema.get("properties", {}).items():
        if name not in node and "default" in sub:
            node[name] = copy.deepcopy(sub["default"])
        if isinstance(node.get(name), dict) and sub.get("type") == "object":
            _fill_defaults(node[name], sub)


def _number(value, default):
    """``value`` written like the schema's ``default`` when both are numbers of equal value (10.0 → 10 where
    the default is an integer, 6 → 6.0 where it is a float); anything else unchanged."""
    numbers = (int, float)
    if isinstance(value, bool) or isinstance(default, bool) or not isinstance(value, numbers):
        return value
    if isinstance(default, int) and isinstance(value, float) and value.is_integer():
        return int(value)
    if isinstance(default, float) and isinstance(value, int):
        return float(value)
    return value


def _like_defaults(node: dict, schema: dict) -> None:
    """Write every number as its schema default is written, so that equal settings give equal protocol ids
    (the ids hash the JSON text, where 10 and 10.0 differ)."""
    for name, sub in schema.get("properties", {}).items():
        if name not in node:
            continue
        if "default" in sub:
            default = sub["default"]
            kinds = sub.get("type", [])
            kinds = {kinds} if isinstance(kinds, str) else set(kinds)
            if default is None and "number" in kinds and "integer" not in kinds:
                default = 0.0  # a number field that defaults to null: 1 and 1.0 name one setting (an adversarial
                # check: device.eqe=1 and =1.0 ranked into two folders)
            node[name] = _number(node[name], default)
        if isinstance(node[name], dict) and sub.get("type") == "object":
            _like_defaults(node[name], sub)


#: units of a field's description (its first ``[...]``) that a bound error names, so that a value in mV or meV
#: reads as the slip it is ("300 is greater than the maximum of 2 (device.loss_v is in V)")
_BOUND_UNITS = ("V", "eV", "%", "K", "s", "eV/Å", "kcal/mol", "Å", "degrees")
_BOUNDS = ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum")


def _unit(schema: dict) -> str:
    """The physical unit of a field (the first ``[...]`` of its description, when one of :data:`_BOUND_UNITS`)."""
    found = re.search(r"\[([^\]]+)\]", str(schema.get("description", "")))
    return found.group(1) if found and found.group(1) in _BOUND_UNITS else ""


#: the longest schema message (jsonschema's own words) shown as it is; a longer one shows its value shortened
_LONGEST_MESSAGE = 300


def _message(error: jsonschema.ValidationError) -> str:
    """jsonschema's message of ``error``, the value in it shortened when the message is long (a list of 10 000
    values in a number field was said in full).

    Examples
    --------
    >>> error = next(jsonschema.Draft202012Validator({"type": "number"}).iter_errors(["lol"] * 5000))
    >>> _message(error)
    "['lol', 'lol', 'lol', 'lol', 'lol', 'lol', ...] is not of type 'number'"
    """
    import reprlib

    message = error.message
    if len(message) <= _LONGEST_MESSAGE:
        return message
    message = message.replace(repr(error.instance), reprlib.repr(error.instance), 1)  # bounded: shape_problem
    return message if len(message) <= _LONGEST_MESSAGE else message[:_LONGEST_MESSAGE - 3] + "..."


def _describe(error: jsonschema.ValidationError, section: str = "") -> str:
    field = ".".join([section] * bool(section) + [str(p) for p in error.absolute_path]) or "(top level)"
    message = _message(error)
    schema = error.schema if isinstance(error.schema, dict) else {}
    if error.validator in _BOUNDS and error.absolute_path:
        # the bound's own schema node has no description: the field's node (the parent of the bound) has it
        node = _schema()
        for part in ([section] if section else []) + [str(p) for p in error.absolute_path]:
            node = node.get("properties", {}).get(part, {})
        unit = _unit(node)
        if unit:
            return f"field {field}: {message} ({field} is in {unit})"
    allowed = ""
    if "enum" in schema and len(schema["enum"]) == 1 and schema.get("description"):
        allowed = f"; {schema['description']}"  # a fixed setting says why it is fixed
    elif "enum" in schema:
        allowed = f"; allowed values: {', '.join(map(str, schema['enum']))}"
    elif error.validator == "additionalProperties":
        props = sorted(error.schema.get("properties", {}))
        allowed = f"; allowed fields: {', '.join(props)}"
    elif "then" in error.schema_path and schema.get("description"):
        # a rule between two fields (an if/then of the schema): its own words say why, not only "not of type 'null'"
        allowed = f": {schema['description']}"
    return f"field {field}: {message}{allowed}"


def non_finite(node, prefix: str = "") -> list[tuple[str, float]]:
    """``(field, value)`` of every number of a configuration that is NaN or infinite.

    JSON Schema bounds let NaN through (every comparison with NaN is false), and YAML reads ``.nan`` and
    ``.inf`` as numbers: ``rank.target_pce_pct: .nan`` gave P(PCE > target) = 0 for every row and
    ``rank.gap_min_ev: .nan`` switched the gap window off (a new user's audit).

    Examples
    --------
    >>> non_finite({"rank": {"target_pce_pct": float("nan"), "seed": 1}, "x": [1.0, float("inf")]})
    [('rank.target_pce_pct', nan), ('x[1]', inf)]
    """
    import math

    out: list[tuple[str, float]] = []
    if isinstance(node, dict):
        for key, value in node.items():
            out += non_finite(value, f"{prefix}.{key}" if prefix else str(key))
    elif isinstance(node, (list, tuple)):
        for i, value in enumerate(node):
            out += non_finite(value, f"{prefix}[{i}]")
    elif isinstance(node, float) and not math.isfinite(node):
        out.append((prefix, node))
    return out


def non_finite_text(value: float) -> str:
    """Why a NaN or infinite setting is refused, in words (one home for the config file and ``--set``)."""
    return f"{value} is not a finite number; give a number (NaN and infinity are not allowed)"


def resolve(config: dict | None, source: str = "configuration") -> dict:
    """Validate ``config`` and return a plain-dict copy with every default filled in.

    Most code wants :class:`screen.config.Config` (validated once, typed
    sections, cached protocol id); this is the validation step it runs.

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
    >>> cfg["device"]["eqe"], cfg["device"]["model"]
    (0.5, 'fitted')
    >>> resolve({"electronic": {"accuracy": 10.0}})["electronic"]["accuracy"]  # written as the default is
    10
    >>> resolve({"device": {"absorber": "acceptor"}})
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: configuration: field device.absorber: 'acceptor' is not one of ['donor', 'both']; allowed values: donor, both
    >>> resolve({"rank": {"target_pce_pct": float("nan")}})
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: configuration: field rank.target_pce_pct: nan is not a finite number; give a number (NaN and infinity are not allowed)
    >>> lol = ["lol"] * 9
    >>> for _ in range(8):
    ...     lol = [lol] * 9  # 9**9 values once written out, a few hundred in memory (a YAML alias bomb)
    >>> resolve({"rank": {"seed": lol}})
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: configuration: field rank.seed: too large a value (more than 100000 values once written out; a setting is a number, a word or a short list)
    """
    cfg = dict(config or {})
    problem = shape_problem(cfg)
    if problem:  # before anything walks it: a copy, the schema's messages and non_finite would write it out
        raise ConfigError(f"{source}: {problem}")
    cfg = _unshared(cfg)
    schema = _schema()
    read_as_written(cfg, schema)
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(cfg), key=lambda e: list(e.absolute_path))
    # a bound broken by .inf is said as "not a finite number" below, as --set says it
    errors = [e for e in errors if not (isinstance(e.instance, float) and not math.isfinite(e.instance))]
    if errors:
        raise ConfigError(f"{source}: " + "; ".join(_describe(e) for e in errors))
    bad = non_finite(cfg)
    if bad:  # after the schema: an unknown field is named as such first
        raise ConfigError(f"{source}: " + "; ".join(f"field {field}: {non_finite_text(value)}" for field, value in bad))
    _fill_defaults(cfg, schema)
    _like_defaults(cfg, schema)
    errors = sorted(validator.iter_errors(cfg), key=lambda e: list(e.absolute_path))
    if errors:  # a default that breaks the schema is a bug here, still say it clearly
        raise ConfigError(f"{source} (after defaults): " + "; ".join(_describe(e) for e in errors))
    return cfg


#: how deeply a configuration may nest mappings and lists (one needs 3: sections, their fields, a list of values)
MAX_NESTING = 32
#: how many values a configuration may hold, counted as written out (a value reached twice counts twice); a full
#: configuration holds a few hundred
MAX_VALUES = 100_000


def shape_problem(config, prefix: str = "") -> str | None:
    """Why ``config`` cannot be a configuration by its shape alone, in words; ``None`` when it can.

    Nested more than :data:`MAX_NESTING` mappings and lists deep, more than :data:`MAX_VALUES` values once written
    out, or a value that holds itself. Checked before anything walks the configuration: a YAML alias bomb (nine
    levels of aliases: 9**9 values that share nine lists) was written out by the schema's message, 2.9 GB
    and a MemoryError after 32 s, and 3 000 nested mappings gave a RecursionError (a security audit). Iterative,
    and each object is visited once, however often it is reached.

    Parameters
    ----------
    config : mapping
        A configuration (or one section, then ``prefix`` is its name).
    prefix : str
        Field name that the paths in the message start with.

    Examples
    --------
    >>> deep = {}
    >>> node = deep.setdefault("rank", {})
    >>> for i in range(40):
    ...     node = node.setdefault(f"k{i}", {})
    >>> shape_problem(deep)
    'field rank.k0.k1...: nested too deeply (more than 32 levels of mappings and lists; a configuration holds sections of fields: `section: {field: value}`)'
    >>> loop = []; loop.append(loop)
    >>> shape_problem({"x": loop}, "rank")
    'field rank.x: the value holds itself'
    >>> shape_problem({"rank": {"seed": 1}, "prepare": {"allowed_elements": ["C", "H"]}}) is None
    True
    """
    def where(path: list) -> str:
        keys = []
        for step in path:
            if not isinstance(step, str):
                break
            keys.append(step)
        return ".".join([prefix] * bool(prefix) + keys[:3]) + "..." * (len(keys) > 3) or "(top level)"

    def nested(path: list) -> str:
        return (f"field {where(path)}: nested too deeply (more than {MAX_NESTING} levels of mappings and lists; a "
                "configuration holds sections of fields: `section: {field: value}`)")

    def too_large(path: list) -> str:
        return (f"field {where(path)}: too large a value (more than {MAX_VALUES} values once written out; a setting "
                "is a number, a word or a short list)")

    def items(node):
        return iter(node.items()) if isinstance(node, dict) else iter(enumerate(node))

    kinds = (dict, list, tuple)
    if not isinstance(config, kinds):
        return None
    size: dict[int, int] = {}  # id → values in it, itself included, written out (objects walked to the end)
    height: dict[int, int] = {}  # id → levels of mappings and lists, itself included
    stack = [[config, [], items(config), 1, 0]]  # [object, path, its items, values so far, levels below it]
    walking = {id(config)}
    while stack:
        frame = stack[-1]
        for key, child in frame[2]:
            if not isinstance(child, kinds):
                frame[3] += 1
                continue
            path = frame[1] + [str(key) if isinstance(frame[0], dict) else int(key)]
            if id(child) in walking:
                return f"field {where(path)}: the value holds itself"
            if id(child) in size:  # reached before: its counts, not another walk
                frame[3] += size[id(child)]
                frame[4] = max(frame[4], height[id(child)])
                if len(stack) + height[id(child)] > MAX_NESTING:
                    return nested(path)
                if frame[3] > MAX_VALUES:
                    return too_large(frame[1])
                continue
            if len(stack) + 1 > MAX_NESTING:
                return nested(path)
            walking.add(id(child))
            stack.append([child, path, items(child), 1, 0])
            break
        else:
            stack.pop()
            walking.discard(id(frame[0]))
            size[id(frame[0])], height[id(frame[0])] = frame[3], frame[4] + 1
            if frame[3] > MAX_VALUES:
                return too_large(frame[1])
            if stack:
                stack[-1][3] += frame[3]
                stack[-1][4] = max(stack[-1][4], frame[4] + 1)
    return None


def _unshared(node):
    """A deep copy in which no mapping or list is reached twice (``copy.deepcopy`` keeps an object given for two
    settings one object, which ``yaml.safe_dump`` writes as an anchor and an alias: a run folder's ``config.yaml``
    must read back, and config files take no aliases, :func:`screen.config.read_config_file`)."""
    if isinstance(node, dict):
        return {key: _unshared(value) for key, value in node.items()}
    if isinstance(node, list):
        return [_unshared(value) for value in node]
    return copy.deepcopy(node)


#: a number as JSON and YAML 1.2 write it; YAML 1.1 (PyYAML) reads ``1e1`` and ``1.2e1`` as text
_NUMBER_TEXT = re.compile(r"[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?")
#: settings that hold a path: a leading ``~`` is the home folder, as in a path option
PATH_FIELDS = (("candidates",), ("out",), ("partner",), ("calibration", "models"), ("calibration", "reference"),
               ("store", "path"))


def read_as_written(node: dict, schema: dict) -> None:
    """Read what YAML 1.1 leaves as text the way the user meant it, in place: a number written with an exponent
    (``1e3``, ``1.2e1``) where the schema wants a number, and a leading ``~`` in a path setting (an adversarial
    check: ``--set rank.n_samples=1e3`` was told "not of type 'number'", ``partner: ~/acc.csv`` in a config file
    passed the checks and failed in the workflow).

    Examples
    --------
    >>> cfg = {"rank": {"n_samples": "1e3", "target_pce_pct": "1.2e1"}, "out": "~/x", "partner": "y6"}
    >>> read_as_written(cfg, _schema()); cfg["rank"], cfg["out"].startswith("~"), cfg["partner"]
    ({'n_samples': 1000, 'target_pce_pct': 12.0}, False, 'y6')
    """
    import os

    for path in PATH_FIELDS:
        holder = node
        for key in path[:-1]:
            holder = holder.get(key) if isinstance(holder, dict) else None
        if isinstance(holder, dict) and isinstance(holder.get(path[-1]), str) and holder[path[-1]].startswith("~"):
            holder[path[-1]] = os.path.expanduser(holder[path[-1]])

    def walk(values: dict, props: dict) -> None:
        for key, value in values.items():
            sub = props.get(key)
            if not isinstance(sub, dict):
                continue
            if isinstance(value, dict) and sub.get("type") == "object":
                walk(value, sub.get("properties", {}))
                continue
            kinds = sub.get("type", [])
            kinds = {kinds} if isinstance(kinds, str) else set(kinds)
            if isinstance(value, str) and "string" not in kinds and kinds & {"number", "integer"} \
                    and _NUMBER_TEXT.fullmatch(value.strip()):
                number = float(value)
                values[key] = int(number) if "integer" in kinds and number.is_integer() else number

    walk(node, schema.get("properties", {}))


def _plain(value):
    """A value as the schema and JSON know it: numpy scalars and arrays as Python numbers and lists, tuples as
    lists, other real numbers (``Decimal``, ``Fraction``) as floats (an adversarial check: ``Decimal('NaN')`` raised
    from inside the schema check, ``Decimal('Infinity')`` passed it, an array raised ValueError).

    Examples
    --------
    >>> from decimal import Decimal
    >>> import numpy as np
    >>> _plain(np.array([5.0, 25.0])), _plain(Decimal("12.5")), _plain(np.int64(3)), _plain(True)
    ([5.0, 25.0], 12.5, 3, True)
    """
    import numbers

    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if type(value).__module__ == "numpy" and hasattr(value, "tolist"):
        return value.tolist()
    if type(value).__module__ == "numpy" and hasattr(value, "item"):
        return value.item()
    if isinstance(value, numbers.Number) and not isinstance(value, (bool, int, float, complex)):
        return float(value)  # Decimal is a Number but not a Real
    return value


@lru_cache(maxsize=None)
def _section_validator(section: str) -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(_schema()["properties"][section])


def check_section(section: str, values: Mapping, source: str) -> dict:
    """Hold the values of one config section to the schema, as :func:`resolve` holds a whole configuration.

    The checks of :func:`resolve` for one section, with the same messages: types, allowed values, bounds,
    unknown keys (the section's ``additionalProperties``) and the non-finite rule (:func:`non_finite`). The
    values given are checked, nothing is filled in; the options dataclasses (:func:`check_options`), the
    ranking's device model and a dye-cell ranking's settings use it, so that Python is refused what the
    command line and a config file are refused (an API audit: ``RankOptions(target_pce_pct=nan)`` gave
    P(PCE > target) = 0 for every row, ``n_samples=3`` a P of 1.0 or 0.667).

    Parameters
    ----------
    section : str
        A section of the schema (``rank``, ``device``, ``dyecell`` ...).
    values : mapping
        Some or all of its fields.
    source : str
        Who gave them, for the message (a class or function name).

    Returns
    -------
    dict
        The values, numpy scalars as Python numbers and every number written as its schema default is (10.0 → 10
        where the default is an integer, 6 → 6.0 where it is a float), tuples as lists.

    Raises
    ------
    ConfigError
        Naming ``source``, the field and the allowed values.

    Examples
    --------
    >>> check_section("rank", {"n_samples": 500.0, "target_pce_pct": 9}, "RankOptions")
    {'n_samples': 500, 'target_pce_pct': 9.0}
    >>> check_section("rank", {"n_samples": 3}, "RankOptions")
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: RankOptions: field rank.n_samples: 3 is less than the minimum of 10
    >>> check_section("device", {"loss_v": 300}, "DeviceModel")
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: DeviceModel: field device.loss_v: 300 is greater than the maximum of 2 (device.loss_v is in V)
    >>> check_section("rank", {"target_pce_pct": float("nan")}, "RankOptions")
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: RankOptions: field rank.target_pce_pct: nan is not a finite number; give a number (NaN and infinity are not allowed)
    """
    problem = shape_problem(dict(values), section)
    if problem:  # before _plain and the schema's messages write it out
        raise ConfigError(f"{source}: {problem}")
    data = {key: _plain(value) for key, value in dict(values).items()}
    errors = sorted(_section_validator(section).iter_errors(data), key=lambda e: [str(p) for p in e.absolute_path])
    if errors:
        raise ConfigError(f"{source}: " + "; ".join(_describe(e, section) for e in errors))
    bad = non_finite(data, section)
    if bad:
        raise ConfigError(f"{source}: " + "; ".join(f"field {field}: {non_finite_text(value)}" for field, value in bad))
    _like_defaults(data, _schema()["properties"][section])
    return data


def check_options(options, section: str) -> None:
    """Hold an options dataclass to its schema section (:func:`check_section`); call it from ``__post_init__``.

    Every field of ``options`` must be a field of ``section``. A number is stored as the schema writes it
    (``n_samples=500.0`` → 500; a numpy scalar → a Python number), a tuple as a list (the caller turns it back).

    Raises
    ------
    ConfigError
        Naming the class, the field and the allowed values.
    """
    values = {f.name: getattr(options, f.name) for f in dataclasses.fields(options)}
    checked = check_section(section, values, type(options).__name__)
    for name, value in checked.items():
        if value is not values[name]:
            object.__setattr__(options, name, value)


@lru_cache(maxsize=1)
def _defaults() -> dict:
    return resolve({})


def defaults() -> dict:
    """The complete default configuration (a fresh copy).

    Examples
    --------
    >>> defaults()["levels"]["scale"]
    'film'
    """
    return copy.deepcopy(_defaults())


def section_defaults(section: str) -> dict:
    """Defaults of one schema section: the single source of an options dataclass's defaults.

    Examples
    --------
    >>> section_defaults("prepare")["min_shards"]
    4
    """
    return copy.deepcopy(_defaults()[section])
