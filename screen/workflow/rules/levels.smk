# Join every input row with its computed values; calibrated columns come from the models.
# levels.oligomers.csv (the per-n table of the polymers) is no declared output: the job writes it only when the
# candidates hold a polymer and removes an old one otherwise, and a declared output must exist after every job
# (levels.csv.meta.json names it, or null).


rule levels:
    input:
        outdir=f"{WORK}/candidates/prepared",
        electronic=electronic_tables("candidates"),
        models=MODELS,
    output:
        levels=LEVELS,
        meta=f"{LEVELS}.meta.json",
    params:
        py=PY,
        cfg=sections("candidates", "structures", "electronic", "polymer", "levels", "calibration"),
        pinned=PIN_TEXT,
    resources:
        mem_mb=2000,
        runtime=15,
    log:
        f"{LOGS}/levels.log",
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} levels --manifest {input.outdir:q}/manifest.csv"
        " --electronic {input.electronic:q} --models {input.models:q} --out {output.levels:q} --meta {output.meta:q}"
        " --pinned={params.pinned:q} > {log:q} 2>&1"
