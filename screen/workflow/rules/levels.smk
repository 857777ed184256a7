# Join every input row with its computed values; calibrated columns come from the models.


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
    log:
        f"{LOGS}/levels.log",
    conda:
        "../envs/dascreen.yaml"
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} levels --manifest {input.outdir:q}/manifest.csv"
        " --electronic {input.electronic:q} --models {input.models:q} --out {output.levels:q} --meta {output.meta:q}"
        " --pinned={params.pinned:q} > {log:q} 2>&1"
