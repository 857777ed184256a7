# strict: true makes a direct snakemake run fail when a row of levels.csv was rejected or failed, once levels.csv
# and the ranking are written (as `dascreen run --strict`, whose exit code is 3; Snakemake's own exit status is
# then 1, with this job's one line on the console: its stderr is not redirected). A run started by dascreen leaves
# strict to the command, which checks the same counts after the workflow.
STRICT = f"{LOGS}/strict.txt" if CFG["strict"] and not LAUNCHED else None


if STRICT:

    rule strict:
        input:
            levels=LEVELS,
            ranking=RANKING,
        output:
            STRICT,
        params:
            py=PY,
        resources:
            mem_mb=1000,
            runtime=5,
        log:
            f"{LOGS}/strict.log",
        shell:
            "{params.py} -m screen.stages --config '{{}}' strict --levels {input.levels:q} --out {output:q} > {log:q}"
