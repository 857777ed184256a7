"""The run configuration: one :class:`Config` object per process.

Each process boundary builds exactly one :class:`Config` — the ``dascreen``
command, every ``python -m screen.stages`` job and the workflow's
``rules/common.smk`` — validated once against
``screen/workflow/schemas/config.schema.yaml`` (:mod:`screen.schema`), with
typed sections for the stages (``cfg.structures``, ``cfg.electronic``,
``cfg.execution``), dict-like access to every section (``cfg["rank"]``) and
the protocol and its id computed once.  Functions that accept a configuration
take a :class:`Config`; given a plain dict they build one
(:meth:`Config.of`), which is a no-op for a :class:`Config`.
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
from collections.abc import Callable, Iterator, Mapping
from functools import cached_property
from pathlib import Path

import yaml

from screen.errors import ConfigError
from screen.options import (EARLIER_PROTOCOL_VALUES, ElectronicOptions, ExecutionOptions, StructureOptions,
                            route_structures)
from screen.schema import MAX_NESTING, SCHEMA_PATH, defaults, resolve, section_defaults

__all__ = ["SCHEMA_PATH", "ConfigError", "Config", "load_config", "read_config_file", "load_yaml", "read_problem",
           "merge", "resolve", "defaults", "section_defaults", "data_path", "PACKAGE_ROOT",
           "install_problem", "protocol", "protocol_id"]

#: the folder that holds the ``screen`` package and, in an installation from the repository, the shipped data
#: folders (``models/``, ``models/reference/``)
PACKAGE_ROOT = Path(__file__).resolve().parent.parent


def install_problem() -> str:
    """``""`` when the shipped data folders are beside the package (a checkout, or ``pip install -e <clone>``), else
    the one line that says what is wrong and the fix.

    ``models/`` (the calibration, ``models/device/fitted.json``, ``models/reference/``) lives at the top of the
    repository and is not in the wheel: after ``pip install .`` :data:`PACKAGE_ROOT` is site-packages, and the
    commands that need those data stopped after their checks with a message that named a site-packages path and a
    fix that could not work (a packaging audit). A checkout that lacks only ``fitted.json`` (removed to be written
    again by ``python -m screen.devicefit --write``) is no installation problem: ``models/reference/`` is there.

    Examples
    --------
    >>> install_problem() == "" or not (PACKAGE_ROOT / "models" / "reference").is_dir()
    True
    """
    models = PACKAGE_ROOT / "models"
    if (models / "device" / "fitted.json").is_file() or (models / "reference").is_dir():
        return ""
    return (f"this installation has no models folder ({models}): dascreen runs from a clone of its repository "
            "installed with `pip install -e <clone>` (the calibration and reference data live in the repository's "
            "models/ folder)")


def data_path(path: str | Path) -> Path:
    """Absolute path of a data folder: as given if absolute or present under the working directory, else the copy
    shipped beside the package (``models/``, ``models/reference/``).

    The rule the ``dascreen`` command applies to ``calibration.models`` and ``calibration.reference``
    (:meth:`Config.located`), so that a Python session started in any folder finds the shipped calibration as the
    command does (before, outside the repository the default ``models`` named a folder of the working directory:
    no calibration was found, and the reference data hashed as those of an empty folder).

    Examples
    --------
    >>> data_path("models/reference") == PACKAGE_ROOT / "models" / "reference" or Path("models/reference").exists()
    True
    >>> data_path("/abs/x").as_posix()
    '/abs/x'
    """
    path = Path(path)
    if path.is_absolute() or path.exists():
        return path.resolve()
    return PACKAGE_ROOT / path


def nearest_existing(path: str | Path) -> Path:
    """``path`` (made absolute) if it exists, a dangling link included, else its nearest existing parent: the
    folder a new ``path`` would be created in, whose permissions decide whether it can be.

    Examples
    --------
    >>> import tempfile
    >>> top = Path(tempfile.mkdtemp())
    >>> nearest_existing(top / "new" / "sub") == top
    True
    """
    path = Path(path).absolute()
    while not os.path.lexists(path) and path.parent != path:
        path = path.parent
    return path


class Config(Mapping):
    """A validated run configuration with every default filled in.

    Build it with :meth:`Config.of` (a mapping), :meth:`Config.load` (a YAML
    file plus overrides) or :meth:`Config.from_json` (a job's ``--config``).
    It is read-only by convention: the sections returned by ``cfg[name]`` are
    the stored dicts, so derive a changed configuration with
    :meth:`with_overrides` instead of editing them.

    Parameters
    ----------
    config : mapping or None
        Partial configuration (validated and completed here).
    source : str
        Where it came from, for error messages (a file name).

    Examples
    --------
    >>> cfg = Config.of({"structures": {"geometry": "xtb"}})
    >>> cfg.structures.geometry, cfg["device"]["model"]
    ('xtb', 'fitted')
    >>> cfg.protocol_id.startswith("tblite-gfn2-xtb-")
    True
    >>> Config.of(cfg) is cfg
    True
    """

    def __init__(self, config: Mapping | None = None, source: str = "configuration"):
        self._data = resolve(dict(config or {}), source)
        self.source = source

    @classmethod
    def of(cls, config: Mapping | None, source: str = "configuration") -> Config:
        """``config`` itself if it is a :class:`Config`, else a new one built from it."""
        return config if isinstance(config, Config) else cls(config, source)

    @classmethod
    def from_json(cls, text: str, source: str = "workflow configuration") -> Config:
        """From JSON text (the ``--config`` argument of a stage job).

        Examples
        --------
        >>> Config.from_json('{"levels": {"scale": "gas"}}')["levels"]["scale"]
        'gas'
        """
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ConfigError(f"{source}: not valid JSON: {exc}") from exc
        except RecursionError:
            raise ConfigError(f"{source}: nested too deeply (more than {MAX_NESTING} levels of mappings and "
                              "lists)") from None
        return cls(data, source)

    @classmethod
    def load(cls, path: str | Path | None = None, overrides: Mapping | None = None) -> Config:
        """Read a YAML config file, apply ``overrides`` (nested mapping), validate.

        Raises
        ------
        ConfigError
            Unreadable file or invalid content (message names the file and field).
        """
        cfg = read_config_file(path)
        merge(cfg, overrides or {})
        return cls(cfg, "configuration" if path is None else str(path))

    def with_overrides(self, overrides: Mapping, source: str | None = None) -> Config:
        """A new configuration: this one with ``overrides`` (nested mapping) merged in.

        Examples
        --------
        >>> Config.of({}).with_overrides({"rank": {"role": "donor"}})["rank"]["role"]
        'donor'
        """
        data = self.to_dict()
        merge(data, overrides)
        return Config(data, source or self.source)

    def with_paths(self, locate: Callable[[str], str | Path]) -> Config:
        """A copy whose data folders (``calibration.models``, ``calibration.reference``) are ``locate(path)``.

        Only path text changes, so the copy needs no new validation (the
        ``dascreen`` command makes them absolute before the workflow runs in
        another directory).

        Examples
        --------
        >>> Config.of({}).with_paths(lambda p: "/data/" + p)["calibration"]["models"]
        '/data/models'
        """
        data = self.to_dict()
        for key in ("models", "reference"):
            data["calibration"][key] = str(locate(data["calibration"][key]))
        new = Config.__new__(Config)
        new._data, new.source = data, self.source
        return new

    def located(self) -> Config:
        """A copy whose data folders are absolute, found as the ``dascreen`` command finds them (:func:`data_path`).

        A relative ``calibration.models`` or ``calibration.reference`` (the defaults ``models`` and
        ``models/reference``) is taken under the working directory when it exists there, else beside the
        package; protocol ids and calibration fingerprints do not depend on where the folders are.

        Examples
        --------
        >>> cfg = Config.of({}).located()
        >>> Path(cfg["calibration"]["reference"]).is_absolute(), cfg.protocol_id == Config.of({}).protocol_id
        (True, True)
        """
        return self.with_paths(data_path)

    @property
    def models_folder(self) -> Path:
        """``calibration.models`` as an absolute path (:func:`data_path`; read at each call: it follows the working
        directory)."""
        return data_path(self._data["calibration"]["models"])

    @property
    def reference_folder(self) -> Path:
        """``calibration.reference`` as an absolute path (:func:`data_path`)."""
        return data_path(self._data["calibration"]["reference"])

    # ------------------------------------------------------------------ mapping protocol
    def __getitem__(self, name: str):
        return self._data[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._data)

    def __len__(self) -> int:
        return len(self._data)

    def __repr__(self) -> str:
        return f"Config({self.source!r}, protocol {self.protocol_id})"

    def to_dict(self) -> dict:
        """A deep plain-dict copy (for YAML/JSON dumps)."""
        return copy.deepcopy(self._data)

    def sections(self, *names: str) -> dict:
        """A plain-dict copy of some sections (what a workflow job gets as ``--config``)."""
        return {n: copy.deepcopy(self._data[n]) for n in names}

    # ------------------------------------------------------------------ typed sections
    @cached_property
    def structures(self) -> StructureOptions:
        """The ``structures`` section as :class:`screen.options.StructureOptions`."""
        return StructureOptions.from_mapping(self._data["structures"])

    @cached_property
    def electronic(self) -> ElectronicOptions:
        """The ``electronic`` section as :class:`screen.options.ElectronicOptions`."""
        return ElectronicOptions.from_mapping(self._data["electronic"])

    @cached_property
    def execution(self) -> ExecutionOptions:
        """The ``execution`` section as :class:`screen.options.ExecutionOptions`."""
        return ExecutionOptions(**self._data["execution"])

    # ------------------------------------------------------------------ protocol
    @cached_property
    def protocol(self) -> dict:
        """The settings that determine the computed numbers (structures + electronic).

        Partner, device and ranking settings are deliberately absent: changing
        them must never invalidate the quantum chemistry or the calibration.
        Structures options without effect on the chosen ``geometry`` route are left out
        (:func:`screen.options.route_structures`), so that route keeps its id, and so are newer options at the
        value that reproduces the route from before they existed (:data:`screen.options.EARLIER_PROTOCOL_VALUES`),
        so a protocol that sets it keeps its earlier id.
        """
        electronic = {k: v for k, v in self._data["electronic"].items() if k != "threads"}
        earlier = EARLIER_PROTOCOL_VALUES["structures"]
        structures = {k: v for k, v in route_structures(self._data["structures"]).items()
                      if not (k in earlier and v == earlier[k])}
        return copy.deepcopy({"structures": structures, "electronic": electronic})

    @cached_property
    def protocol_id(self) -> str:
        """Short readable id of the protocol, e.g. ``tblite-gfn2-ff-1a2b3c4d``."""
        proto = self.protocol
        digest = hashlib.sha256(json.dumps(proto, sort_keys=True).encode()).hexdigest()[:8]
        el = proto["electronic"]
        method = el["method"].lower().replace("-xtb", "")
        solv = f"-{el['solvent']}" if el["solvent"] else ""
        return f"{el['engine']}-{method}-{proto['structures']['geometry']}{solv}-{digest}"


def merge(base: dict, extra: Mapping) -> None:
    """Merge the nested mapping ``extra`` into ``base`` in place (``extra`` wins).

    Examples
    --------
    >>> base = {"rank": {"role": None, "seed": 1}}
    >>> merge(base, {"rank": {"role": "donor"}}); base
    {'rank': {'role': 'donor', 'seed': 1}}
    """
    for key, value in extra.items():
        if isinstance(value, Mapping) and isinstance(base.get(key), dict):
            merge(base[key], value)
        else:
            base[key] = copy.deepcopy(value)


def read_problem(exc: Exception) -> str:
    """Why a text file could not be read, in one line: not UTF-8, not YAML (where), or the system's reason.

    Examples
    --------
    >>> read_problem(UnicodeDecodeError("utf-8", b"a\\xff", 1, 2, "invalid start byte"))
    'not UTF-8 text (byte 0xff at position 1)'
    >>> try:
    ...     yaml.safe_load("a: [1\\n")
    ... except yaml.YAMLError as exc:
    ...     read_problem(exc)
    "not valid YAML at line 2, column 1: expected ',' or ']', but got '<stream end>'"
    """
    if isinstance(exc, UnicodeDecodeError):
        return f"not UTF-8 text (byte 0x{exc.object[exc.start]:02x} at position {exc.start})"
    if isinstance(exc, _Refused):  # valid YAML, refused in a config file: its own words
        return str(exc)
    if isinstance(exc, yaml.YAMLError):
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark is not None else ""
        problem = getattr(exc, "problem", None) or " ".join(str(exc).split())
        return f"not valid YAML{where}: {problem}"
    if isinstance(exc, OSError):
        return exc.strerror or str(exc)
    return " ".join(str(exc).split())


class _Refused(yaml.YAMLError):
    """A config file written in a way a config file may not be (raised by :class:`_UniqueKeyLoader`); a
    ``yaml.YAMLError``, so that a reader of :func:`load_yaml` that catches those catches it."""


class _RepeatedKey(_Refused):
    """A mapping of a YAML file names one key twice (raised by :class:`_UniqueKeyLoader`)."""


class _UniqueKeyLoader(yaml.SafeLoader):
    """The safe YAML loader, refusing a mapping that names a key twice, aliases and deep nesting.

    YAML keeps the last of two equal keys without a word: a config file with ``device:`` twice (a copy-paste slip)
    ran with the second section's ``eqe`` (a careless user's audit).

    An alias (``*name``, merge keys ``<<: *name`` included) is refused: nine levels of aliases in 380 bytes are
    9**9 values once written out, which the schema's message wrote out (2.9 GB and a MemoryError after 32 s, a
    security audit), and no config file the project ships or a run writes uses one (a run writes its
    ``config.yaml`` without shared values, :func:`screen.schema.resolve`). An anchor without an alias does
    nothing and is left alone. Mappings and lists nested more than :data:`screen.schema.MAX_NESTING` deep are
    refused where the nesting goes too deep (3 000 nested mappings gave a RecursionError of 3 000 lines).
    """

    _depth = 0

    def compose_node(self, parent, index):
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            raise _Refused(f"line {event.start_mark.line + 1}: the YAML alias *{event.anchor}: a config file takes "
                           "no aliases (*name, <<: *name); write the value out where it is used")
        if self.check_event(yaml.SequenceStartEvent, yaml.MappingStartEvent):
            if self._depth >= MAX_NESTING:
                raise _Refused(f"line {self.peek_event().start_mark.line + 1}: nested too deeply (more than "
                               f"{MAX_NESTING} levels of mappings and lists; a config file holds sections of fields: "
                               "`section:` then `  field: value` lines, see `dascreen config --yaml`)")
            self._depth += 1
            try:
                return super().compose_node(parent, index)
            finally:
                self._depth -= 1
        return super().compose_node(parent, index)

    def construct_mapping(self, node, deep=False):
        if isinstance(node, yaml.MappingNode):
            seen: dict = {}
            for key_node, _ in node.value:
                if not isinstance(key_node, yaml.ScalarNode) or key_node.tag == "tag:yaml.org,2002:merge":
                    continue
                key = self.construct_object(key_node, deep=True)
                line = key_node.start_mark.line + 1
                if key in seen:
                    raise _RepeatedKey(f"key {key!r} appears twice (lines {seen[key]} and {line}); "
                                       "keep one (YAML would use the second without a word)")
                seen[key] = line
        return super().construct_mapping(node, deep=deep)


def load_yaml(text: str):
    """YAML text read as a config file is read (:class:`_UniqueKeyLoader`): the safe loader, refusing a key given
    twice in one mapping, a YAML alias and mappings and lists nested more than :data:`screen.schema.MAX_NESTING`
    deep.

    For every reader of a file a user may be sent, such as a run folder's ``config.yaml``: ``yaml.safe_load``
    shares an aliased value, so nine levels of aliases in 380 bytes are 9**9 values for whatever writes the value
    out (``str``, ``json.dumps``, a message), and it recurses once per level of nesting (a security audit).

    Raises
    ------
    yaml.YAMLError
        Not valid YAML, or refused (:func:`read_problem` says which, in one line).

    Examples
    --------
    >>> load_yaml("rank: {seed: 3}")
    {'rank': {'seed': 3}}
    >>> try:
    ...     load_yaml("[" * 100 + "]" * 100)
    ... except yaml.YAMLError as exc:
    ...     print(read_problem(exc))
    line 1: nested too deeply (more than 32 levels of mappings and lists; a config file holds sections of fields: `section:` then `  field: value` lines, see `dascreen config --yaml`)
    """
    try:
        return yaml.load(text, Loader=_UniqueKeyLoader)  # noqa: S506 - a SafeLoader
    except RecursionError:  # a last guard: the loader refuses deep nesting well before Python's limit
        raise _Refused(f"nested too deeply (more than {MAX_NESTING} levels of mappings and lists)") from None


def read_config_file(path: str | Path | None) -> dict:
    """The mapping of a YAML config file (not yet validated); ``{}`` for ``None``.

    Raises
    ------
    ConfigError
        Unreadable file, text that is not UTF-8, invalid YAML, a key given twice in one mapping, a YAML alias,
        mappings and lists nested more than :data:`screen.schema.MAX_NESTING` deep or not a mapping (the message
        names the file).

    Examples
    --------
    >>> import tempfile
    >>> binary = Path(tempfile.mkdtemp()) / "bin.yaml"; _ = binary.write_bytes(b"rank:\\n  seed: \\xff\\n")
    >>> try:
    ...     read_config_file(binary)
    ... except ConfigError as exc:
    ...     print(str(exc).split(": ", 1)[1])
    the config file is not UTF-8 text (byte 0xff at position 14); save it as UTF-8 (a YAML file of fields, see `dascreen config --yaml`)
    >>> twice = binary.with_name("twice.yaml"); _ = twice.write_text("device:\\n  eqe: 0.7\\ndevice:\\n  eqe: 0.8\\n")
    >>> try:
    ...     read_config_file(twice)
    ... except ConfigError as exc:
    ...     print(str(exc).split(": ", 1)[1])
    key 'device' appears twice (lines 1 and 3); keep one (YAML would use the second without a word)
    >>> alias = binary.with_name("alias.yaml"); _ = alias.write_text("x: &a [1, 2]\\nrank:\\n  seed: *a\\n")
    >>> try:
    ...     read_config_file(alias)
    ... except ConfigError as exc:
    ...     print(str(exc).split(": ", 1)[1])
    line 3: the YAML alias *a: a config file takes no aliases (*name, <<: *name); write the value out where it is used
    """
    if path is None:
        return {}
    try:
        cfg = load_yaml(Path(path).read_text(encoding="utf-8")) or {}
    except _Refused as exc:
        raise ConfigError(f"{path}: {exc}") from None
    except UnicodeDecodeError as exc:  # a binary or Latin-1 file gave a traceback (a new user's audit)
        raise ConfigError(f"{path}: the config file is {read_problem(exc)}; save it as UTF-8 (a YAML file of fields, "
                          "see `dascreen config --yaml`)") from None
    except (OSError, yaml.YAMLError) as exc:  # one line: a YAML error's own text spans six
        raise ConfigError(f"{path}: cannot read the config file: {read_problem(exc)}") from None
    if not isinstance(cfg, dict):
        raise ConfigError(f"{path}: the config file must hold a mapping of fields, not {type(cfg).__name__}")
    return _recorded_before_newer_options(cfg)


def _recorded_before_newer_options(cfg: dict) -> dict:
    """A config written out in full by an earlier dascreen (a run folder's ``config.yaml``) keeps its route.

    Its ``structures`` section holds every key of today's schema but the newer options of
    :data:`screen.options.EARLIER_PROTOCOL_VALUES`, which did not exist when it was written: those are
    filled with the value that reproduces that route, so the run keeps its protocol id (a re-ranking of
    an earlier run folder in place was refused as "of another protocol"). A hand-written file that
    leaves keys out is not a full record and takes the defaults.

    Examples
    --------
    >>> full = {k: v for k, v in section_defaults("structures").items() if k != "rigid_embedding"}
    >>> _recorded_before_newer_options({"structures": full})["structures"]["rigid_embedding"]
    'cycle_rank'
    >>> _recorded_before_newer_options({"structures": {"geometry": "xtb"}})
    {'structures': {'geometry': 'xtb'}}
    """
    structures = cfg.get("structures")
    newer = EARLIER_PROTOCOL_VALUES["structures"]
    if not isinstance(structures, dict) or any(k in structures for k in newer):
        return cfg
    if set(section_defaults("structures")) - set(newer) <= set(structures):
        cfg["structures"] = {**structures, **newer}
    return cfg


def load_config(path: str | Path | None = None, overrides: Mapping | None = None) -> Config:
    """Read a YAML config file, apply ``overrides``, validate: :meth:`Config.load`."""
    return Config.load(path, overrides)


def protocol(config: Mapping | None) -> dict:
    """The protocol of a configuration (:attr:`Config.protocol`)."""
    return Config.of(config).protocol


def protocol_id(config: Mapping | None) -> str:
    """Short readable id of the protocol (:attr:`Config.protocol_id`).

    Examples
    --------
    >>> protocol_id({}).startswith("tblite-gfn2-ff-")
    True
    """
    return Config.of(config).protocol_id


def flat_settings(node, prefix: str = "") -> dict:
    """Nested mappings as ``{"a.b": value}``."""
    out = {}
    for key, value in (node or {}).items():
        path = f"{prefix}.{key}" if prefix else str(key)
        if isinstance(value, dict):
            out.update(flat_settings(value, path))
        else:
            out[path] = value
    return out


def changed_calibration_settings(config: Mapping | None) -> dict:
    """The settings a calibration is made for that differ from their defaults, as ``{"section.key": value}``.

    Every field of the structures, electronic and polymer sections except ``electronic.threads`` (the
    protocol and the polymer settings a calibration records): what a ``dascreen calibrate`` or ``dascreen run``
    command needs as ``--set`` to compute with the same settings.

    Examples
    --------
    >>> changed_calibration_settings({"structures": {"geometry": "xtb"}, "electronic": {"threads": 4}})
    {'structures.geometry': 'xtb'}
    """
    cfg = Config.of(config)
    default = flat_settings({k: v for k, v in defaults().items() if k in ("structures", "electronic", "polymer")})
    run = flat_settings({k: cfg[k] for k in ("structures", "electronic", "polymer")})
    return {field: value for field, value in run.items()
            if field != "electronic.threads" and value != default.get(field)}


def calibration_set_args(config: Mapping | None) -> list[str]:
    """``--set FIELD=VALUE`` words (shell-quoted) of :func:`changed_calibration_settings`.

    Examples
    --------
    >>> calibration_set_args({"structures": {"geometry": "xtb"}})
    ['--set structures.geometry=xtb']
    """
    import shlex

    return [f"--set {shlex.quote(f'{k}={setting_text(v)}')}" for k, v in changed_calibration_settings(config).items()]


def setting_text(value) -> str:
    """A setting's value as a ``--set`` writes it (YAML: ``null``, ``true``, ``[a, b]``).

    Examples
    --------
    >>> setting_text(None), setting_text(True), setting_text([1, 2]), setting_text(3.5)
    ('null', 'true', '[1, 2]', '3.5')
    """
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (list, dict)):
        return yaml.safe_dump(value, default_flow_style=True, width=1000).strip()
    return str(value)

