# Calibration models for this protocol, fitted on the reference sets when no shipped model matches.
# The reference molecules go through the very same prepare and compute rules (batch "reference").
# Left out when the dascreen command pinned the run to an installed calibration (rules/common.smk: PIN).


if PIN is None:

    rule reference_input:
        input:
            REFERENCE_FILES,
        output:
            f"{WORK}/reference/input.csv",
        params:
            py=PY,
            cfg=sections("calibration"),
            reference=lambda wildcards, input: Path(input[0]).parent,
        resources:
            mem_mb=1000,
            runtime=10,
        log:
            f"{LOGS}/reference/input.log",
        shell:
            "{params.py} -m screen.stages --config {params.cfg:q} reference-input --reference {params.reference:q}"
            " --out {output:q} > {log:q} 2>&1"


    rule calibrate:
        input:
            reference=REFERENCE_FILES,
            outdir=f"{WORK}/reference/prepared",
            electronic=electronic_tables("reference"),
        output:
            directory(f"{OUT}/models/{PROTOCOL}"),
        params:
            py=PY,
            cfg=sections("structures", "electronic", "polymer", "calibration"),
            root=lambda wildcards, output: Path(output[0]).parent,
            reference=lambda wildcards, input: Path(input.reference[0]).parent,
        resources:
            mem_mb=2000,
            runtime=20,
        log:
            f"{LOGS}/calibrate.log",
        shell:
            "{params.py} -m screen.stages --config {params.cfg:q} calibrate --reference {params.reference:q}"
            " --manifest {input.outdir:q}/manifest.csv --electronic {input.electronic:q}"
            " --models-root {params.root:q} > {log:q} 2>&1"
