# Shared definitions: resolved configuration, output locations, helpers.
import json
import sys

from screen.config import resolve

CFG = resolve(config, "snakemake configuration")
PY = sys.executable
OUT = CFG["out"]
WORK = f"{OUT}/work"
LOGS = f"{OUT}/logs"
LEVELS = f"{OUT}/levels.csv"
INPUTS = {"candidates": CFG["candidates"]}
MAX_SHARDS = 400


def sections(*names):
    """JSON text of the config sections a job depends on (its params, so a change reruns it)."""
    return json.dumps({n: CFG[n] for n in names}, sort_keys=True)


def shard_ids(set_name):
    """Shard numbers of a prepared set (known once the prepare checkpoint has run)."""
    prepared = checkpoints.prepare.get(batch=set_name).output.outdir
    return sorted(glob_wildcards(f"{prepared}/shard-{{shard}}.csv").shard)


def electronic_tables(set_name):
    """Input function: every electronic shard table of a set."""
    def tables(wildcards):
        return expand(f"{WORK}/{set_name}/electronic/shard-{{shard}}.csv", shard=shard_ids(set_name))
    return tables


wildcard_constraints:
    batch=r"[a-z0-9_-]+",
    shard=r"\d\d\d+",
