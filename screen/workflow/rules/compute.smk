# The expensive stages. They depend only on the molecules and the protocol sections of the
# configuration, never on the partner or the device model.


checkpoint prepare:
    input:
        batch_input,
    output:
        outdir=directory(f"{WORK}/{{batch}}/prepared"),
    params:
        py=PY,
        cfg=sections("prepare", "polymer"),
        max_shards=MAX_SHARDS,
        # the candidate file's SHA-256 (rules/common.smk): new content re-runs this job whatever the file's time
        input_sha256=lambda wildcards: INPUT_SHA256.get(wildcards.batch, ""),
    resources:
        mem_mb=2000,
        runtime=15,
    log:
        f"{LOGS}/{{batch}}/prepare.log",
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} prepare --input {input:q} --outdir {output.outdir:q}"
        " --max-shards {params.max_shards} > {log:q} 2>&1"


# One job per shard builds each molecule's structure and computes its raw levels right after, in the same
# worker process (the gas neutral starts from the chosen conformer's ranking single point): the structures
# files and the electronic table of the shard (screen.compute.run_compute). Its params hold only the settings
# that change a number: electronic.threads is the job's `threads` (a profile's set-threads wins; Snakemake scales
# it down to --cores), execution.* and the results store come through the environment (rules/common.smk).
rule compute:
    input:
        shard=f"{WORK}/{{batch}}/prepared/shard-{{shard}}.csv",
    output:
        sdf=f"{WORK}/{{batch}}/structures/shard-{{shard}}.sdf",
        table=f"{WORK}/{{batch}}/structures/shard-{{shard}}.csv",
        electronic=f"{WORK}/{{batch}}/electronic/shard-{{shard}}.csv",
    params:
        py=PY,
        cfg=sections("structures", "electronic"),
    threads: CFG["electronic"]["threads"]
    resources:
        mem_mb=1000,
        runtime=240,
    log:
        f"{LOGS}/{{batch}}/compute/shard-{{shard}}.log",
    benchmark:
        f"{LOGS}/{{batch}}/compute/shard-{{shard}}.benchmark.tsv"
    shell:
        "OMP_NUM_THREADS={threads} {params.py} -m screen.stages --config {params.cfg:q} compute"
        " --shard {input.shard:q} --sdf {output.sdf:q} --table {output.table:q} --out {output.electronic:q}"
        " > {log:q} 2>&1"
