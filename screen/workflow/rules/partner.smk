# A partner given as smiles:<SMILES> is computed exactly like the candidates: it is its own one-row
# batch "partner-<structure key>" that runs through the same prepare and compute rules (structures and
# electronic stages, rules/compute.smk) and gets calibrated levels with the same models, cached like any other batch.
# The rank rule then reads only its levels file.
from screen.partners import partner_key, partner_kind

# cheap: no quantum chemistry at parse time; a partner that cannot work stops here with one line (rules/rank.smk
# checks the rest before any job)
try:
    PARTNER = CFG["partner"]
    PARTNER_KIND = partner_kind(PARTNER)
    # canonical, so that another spelling of the same molecule reuses the batch
    PARTNER_SMILES = f"smiles:{partner_key(PARTNER)[0]}" if PARTNER_KIND == "smiles" else None
    PARTNER_BATCH = f"partner-{partner_key(PARTNER)[1]}" if PARTNER_KIND == "smiles" else None
except DascreenError as exc:
    refuse(exc)
PARTNER_LEVELS = f"{WORK}/{PARTNER_BATCH}/levels.csv" if PARTNER_BATCH else None


if PARTNER_BATCH:

    rule partner_input:
        output:
            f"{WORK}/{PARTNER_BATCH}/input.csv",
        params:
            py=PY,
            cfg=sections(),
            partner=PARTNER_SMILES,
        resources:
            mem_mb=1000,
            runtime=10,
        log:
            f"{LOGS}/{PARTNER_BATCH}/input.log",
        shell:
            "{params.py} -m screen.stages --config {params.cfg:q} partner-input --partner {params.partner:q}"
            " --out {output:q} > {log:q} 2>&1"


rule partner_levels:
    input:
        outdir=f"{WORK}/{{batch}}/prepared",
        electronic=batch_electronic_tables,
        models=MODELS,
        # what the batch was made from (recorded in the levels sidecar)
        made_from=f"{WORK}/{{batch}}/input.csv",
    output:
        levels=f"{WORK}/{{batch}}/levels.csv",
        meta=f"{WORK}/{{batch}}/levels.csv.meta.json",
    wildcard_constraints:
        batch=r"partner-m[0-9a-f]{16}",
    params:
        py=PY,
        cfg=sections("structures", "electronic", "polymer", "levels", "calibration"),
        pinned=PIN_TEXT,
    resources:
        mem_mb=2000,
        runtime=15,
    log:
        f"{LOGS}/{{batch}}/levels.log",
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} levels --manifest {input.outdir:q}/manifest.csv"
        " --electronic {input.electronic:q} --models {input.models:q} --out {output.levels:q}"
        " --meta {output.meta:q} --pinned={params.pinned:q} --input {input.made_from:q} > {log:q} 2>&1"
