# Shared definitions: resolved configuration, output locations, helpers.
import copy
import fcntl
import json
import os
import sys
from pathlib import Path

import yaml

from screen.calibrate import find_models, reference_files
from screen.config import Config
from screen.errors import DascreenError
from screen.launch import pinned_calibration
from screen.provenance import sha256_file
from screen.schema import SCHEMA_PATH
from screen.stages import EXECUTION_ENV
from screen.store import STORE_ENV, run_store, store_location


def refuse(message):
    """Stop the workflow before any job with one line and exit code 2, as `dascreen run` refuses a bad option or
    file (no traceback, no schema dump)."""
    print(f"dascreen: error: {message}", file=sys.stderr, flush=True)
    sys.exit(2)


def typed_command_line(config):
    """``config`` with the text values of ``snakemake --config`` typed by the configuration schema.

    Snakemake reads ``--config strict=true`` and every value inside a nested one such as ``'rank={n_samples: 5}'``
    with YAML's base loader, which gives text only ('true', '5'), so the schema refused them as no boolean or no
    number. Such a text is read again with YAML's safe loader (as the same line in a ``--configfile`` is read) when
    the schema does not take it as text at that place (no string type, not one of the allowed words) and kept only
    when it becomes a number, true/false or null; 'null' also becomes null where the schema allows null. Values
    from config files are untouched.
    """
    given = getattr(getattr(workflow, "config_settings", None), "config", None) or {}
    schema = yaml.safe_load(Path(SCHEMA_PATH).read_text(encoding="utf-8"))
    typed = copy.deepcopy(dict(config))

    def retype(text, node):
        kinds = node.get("type", [])
        kinds = {kinds} if isinstance(kinds, str) else set(kinds)
        enum = node.get("enum", [])
        if text.strip() in ("null", "Null", "NULL", "~") and ("null" in kinds or None in enum):
            return None
        if not kinds or "string" in kinds or text in enum:
            return text
        try:
            value = yaml.safe_load(text)
        except yaml.YAMLError:
            return text
        return value if value is None or isinstance(value, (bool, int, float)) else text

    def walk(given_node, node, schema_node):
        for key, value in given_node.items():
            if key not in node:
                continue
            sub = (schema_node.get("properties") or {}).get(key) or {}
            if isinstance(value, dict) and isinstance(node[key], dict):
                walk(value, node[key], sub)
            elif isinstance(value, str) and node[key] == value:
                node[key] = retype(value, sub)
            elif isinstance(value, list) and node[key] == value:
                node[key] = [retype(v, sub.get("items") or {}) if isinstance(v, str) else v for v in value]

    walk(given, typed, schema)
    return typed


def inherited_run_lock(out):
    """True when this process has OUT/.dascreen.lock open from its parent: the dascreen command holds that lock
    and hands its locked descriptor to the engine (screen.launch.run_workflow, pass_fds); so does `flock FILE
    snakemake ...`."""
    try:
        lock = os.stat(Path(out) / ".dascreen.lock")
    except OSError:
        return False
    # the open descriptors: Linux lists them in /proc/self/fd, macOS in /dev/fd
    listing = next((d for d in (os.path.join(os.sep, "proc", "self", "fd"), os.path.join(os.sep, "dev", "fd"))
                    if os.path.isdir(d)), None)
    fds = [int(n) for n in os.listdir(listing) if n.isdigit()] if listing else range(3, 1024)
    for fd in fds:
        try:
            st = os.fstat(fd)
        except OSError:
            continue
        if (st.st_dev, st.st_ino) == (lock.st_dev, lock.st_ino):
            # an open descriptor is not yet a held lock (a review: `9<OUT/.dascreen.lock` passed while another run
            # held it): this succeeds on the descriptor that holds the lock, or on a free one (then it holds it)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                return False
            return True
    return False


# the one configuration object of the workflow process: validated once, protocol id computed once. A bad setting
# stops here with the one-line message of screen.config (the schema's own check printed the whole schema)
try:
    CFG = Config.of(typed_command_line(config), "snakemake configuration")
except DascreenError as exc:
    refuse(exc)
PROTOCOL = CFG.protocol_id
PY = sys.executable
# normalised and absolute (`out: res/` gave res//levels.csv; the sidecars record these paths)
OUT = os.path.abspath(CFG["out"])
WORK = f"{OUT}/work"
LOGS = f"{OUT}/logs"
LEVELS = f"{OUT}/levels.csv"
REFERENCE = CFG["calibration"]["reference"]
REFERENCE_FILES = reference_files(REFERENCE)
INPUTS = {"candidates": os.path.abspath(CFG["candidates"]), "reference": f"{WORK}/reference/input.csv"}
# the candidate file's content, a param of its prepare job: a file replaced by another with an older time (cp -p,
# rsync -a, an unpacked archive) is prepared again although its time says it is older than the prepared batch
INPUT_SHA256 = {"candidates": sha256_file(CFG["candidates"]) if os.path.isfile(CFG["candidates"]) else ""}
MAX_SHARDS = 400
# the main Snakemake process (not a job's own engine process on a cluster node, which reads this file again)
MAIN = getattr(workflow, "is_main_process", True)
# the run folder's lock is held for this run by the process that started it (see onstart below)
HOLDS_LOCK = inherited_run_lock(OUT)
# started by `dascreen run`/`rank`/`calibrate`, which checked the inputs, the store and the calibration already:
# they hold the lock and always set DASCREEN_STORE for the workflow. Neither alone tells: users set DASCREEN_STORE
# for direct runs too, and may hold the lock with flock(1)
LAUNCHED = HOLDS_LOCK and STORE_ENV in os.environ
if MAIN and not LAUNCHED and not os.path.isfile(CFG["candidates"]):
    # a finished run re-ran levels and rank from its old batch and recorded the missing file as its input (a review)
    refuse(f"candidates: {INPUTS['candidates']} is not a file; give the candidate file (--config candidates=FILE)")

# Settings that change no number reach the jobs through the environment, never through params (a change of a
# param re-runs the job): execution.* (screen.stages reads DASCREEN_EXECUTION) and the results store
# (DASCREEN_STORE, screen.store.resolve_store). Threads are the compute rule's `threads`.
os.environ[EXECUTION_ENV] = json.dumps(CFG["execution"], sort_keys=True)
# A run started by dascreen has DASCREEN_STORE from it; a direct run checks store.path (or DASCREEN_STORE) here,
# as `dascreen run` does: which store the jobs use, or one warning why none (before, its jobs used no store).
if MAIN and not LAUNCHED:
    _store, _notes = run_store(CFG)
    for _line in _notes:
        logger.info(_line)
    os.environ[STORE_ENV] = str(_store or "")
else:  # dascreen set it; or a job's own engine process on a cluster node: its main process's, else store.path
    os.environ.setdefault(STORE_ENV, str(store_location(CFG) or ""))

# Calibration. A run started by the dascreen command is pinned to the calibration its pre-flight check found
# (screen.launch.calibration_pin, environment variable DASCREEN_CALIBRATION_PIN): that folder is used and no
# calibration is ever fitted here (the rules of rules/calibrate.smk are left out); the levels jobs stop with one
# message if it is no longer the same (screen.stages, --pinned). A bare snakemake run decides here: a shipped model
# whose fingerprint matches this protocol, else (calibration.refit: auto or always) one fitted here.
try:
    PIN = pinned_calibration()
except DascreenError as exc:
    refuse(exc)
PIN_TEXT = json.dumps(PIN, sort_keys=True) if PIN else ""
if PIN is not None and not PIN["folder"]:
    raise WorkflowError(
        f"dascreen found no calibration in {CFG['calibration']['models']} that matches this run's settings when it "
        "started the workflow (it may have changed since its check), and a run started by dascreen never fits one "
        "it did not announce; run the same dascreen command again (it says what differs and how to calibrate)"
    )
if PIN is not None:
    SHIPPED = Path(PIN["folder"])
else:
    SHIPPED = None if CFG["calibration"]["refit"] == "always" else find_models(CFG)
if SHIPPED is None and CFG["calibration"]["refit"] == "never":
    raise WorkflowError(
        f"no calibration model in {CFG['calibration']['models']}/{PROTOCOL} matches this protocol and "
        "calibration.refit is 'never'; run `dascreen calibrate` or set calibration.refit: auto"
    )
MODELS = str(SHIPPED) if SHIPPED else f"{OUT}/models/{PROTOCOL}"
if SHIPPED is None:
    logger.info(
        f"dascreen: no shipped calibration matches protocol {PROTOCOL}; the reference molecules in "
        f"{REFERENCE} are computed with this protocol and the models fitted into {MODELS}"
    )

#: settings that change no number, left out of the sections a job gets as its params (execution.* is never
#: passed: see DASCREEN_EXECUTION above); the job's configuration has their defaults, which it does not use
NO_NUMBER = {"electronic": ("threads",), "calibration": ("refit",)}


def sections(*names):
    """JSON text of the config sections a job depends on (its params, so a change reruns it), without the settings
    that change no number (:data:`NO_NUMBER`)."""
    data = CFG.sections(*names)
    for section, keys in NO_NUMBER.items():
        for key in keys:
            data.get(section, {}).pop(key, None)
    return json.dumps(data, sort_keys=True)


def shard_ids(set_name):
    """Shard numbers of a prepared set (known once the prepare checkpoint has run)."""
    prepared = checkpoints.prepare.get(batch=set_name).output.outdir
    return sorted(glob_wildcards(f"{prepared}/shard-{{shard}}.csv").shard)


def electronic_tables(set_name):
    """Input function: every electronic shard table of a set."""
    def tables(wildcards):
        return expand(f"{WORK}/{set_name}/electronic/shard-{{shard}}.csv", shard=shard_ids(set_name))
    return tables


def batch_input(wildcards):
    """Molecule list of a batch: the candidates, the reference set, or a partner's one-row input."""
    return INPUTS.get(wildcards.batch, f"{WORK}/{wildcards.batch}/input.csv")


def batch_electronic_tables(wildcards):
    """Input function: every electronic shard table of the batch named by the wildcard."""
    return electronic_tables(wildcards.batch)(wildcards)


# A direct snakemake run takes the run folder's lock that `dascreen run` holds (OUT/.dascreen.lock, flock), so
# the two never write one folder at once: it refuses while dascreen (or another direct run) holds it, and dascreen
# refuses while it runs. Taken when jobs are about to run (onstart: not for a dry run, --unlock or --lint); a run
# started by dascreen already holds it (HOLDS_LOCK). The kernel releases it when this process ends.
HELD_LOCK = []


onstart:
    if not HOLDS_LOCK:
        import fcntl

        os.makedirs(OUT, exist_ok=True)
        _lock = open(Path(OUT) / ".dascreen.lock", "a")
        try:
            fcntl.flock(_lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            _lock.close()
            raise WorkflowError(
                f"dascreen: error: another run is using {OUT} (a `dascreen` command or another snakemake run); "
                f"wait for it to finish (`dascreen status --out {OUT}`) or give another out"
            ) from None
        HELD_LOCK.append(_lock)


wildcard_constraints:
    batch=r"[a-z0-9_-]+",
    shard=r"\d\d\d+",
