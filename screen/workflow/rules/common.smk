# Shared definitions: resolved configuration, output locations, helpers.
import json
import sys
from pathlib import Path

from screen.calibrate import find_models, reference_files
from screen.config import Config
from screen.launch import pinned_calibration

# the one configuration object of the workflow process: validated once, protocol id computed once
CFG = Config.of(config, "snakemake configuration")
PROTOCOL = CFG.protocol_id
PY = sys.executable
OUT = CFG["out"]
WORK = f"{OUT}/work"
LOGS = f"{OUT}/logs"
LEVELS = f"{OUT}/levels.csv"
REFERENCE = CFG["calibration"]["reference"]
REFERENCE_FILES = reference_files(REFERENCE)
INPUTS = {"candidates": CFG["candidates"], "reference": f"{WORK}/reference/input.csv"}
MAX_SHARDS = 400

# Calibration. A run started by the dascreen command is pinned to the calibration its pre-flight check found
# (screen.launch.calibration_pin, environment variable DASCREEN_CALIBRATION_PIN): that folder is used and no
# calibration is ever fitted here (the rules of rules/calibrate.smk are left out); the levels jobs stop with one
# message if it is no longer the same (screen.stages, --pinned). A bare snakemake run decides here: a shipped model
# whose fingerprint matches this protocol, else (calibration.refit: auto or always) one fitted here.
PIN = pinned_calibration()
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


def sections(*names):
    """JSON text of the config sections a job depends on (its params, so a change reruns it)."""
    return json.dumps(CFG.sections(*names), sort_keys=True)


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


wildcard_constraints:
    batch=r"[a-z0-9_-]+",
    shard=r"\d\d\d+",
