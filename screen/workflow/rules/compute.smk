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
    log:
        f"{LOGS}/{{batch}}/prepare.log",
    conda:
        "../envs/dascreen.yaml"
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} prepare --input {input:q} --outdir {output.outdir:q}"
        " --max-shards {params.max_shards} > {log:q} 2>&1"


rule structures:
    input:
        shard=f"{WORK}/{{batch}}/prepared/shard-{{shard}}.csv",
    output:
        sdf=f"{WORK}/{{batch}}/structures/shard-{{shard}}.sdf",
        table=f"{WORK}/{{batch}}/structures/shard-{{shard}}.csv",
    params:
        py=PY,
        cfg=sections("structures", "execution"),
    threads: 1
    resources:
        mem_mb=1000,
        runtime=120,
    log:
        f"{LOGS}/{{batch}}/structures/shard-{{shard}}.log",
    conda:
        "../envs/dascreen.yaml"
    shell:
        "OMP_NUM_THREADS={threads} {params.py} -m screen.stages --config {params.cfg:q} structures"
        " --shard {input.shard:q} --sdf {output.sdf:q} --table {output.table:q} > {log:q} 2>&1"


rule electronic:
    input:
        sdf=f"{WORK}/{{batch}}/structures/shard-{{shard}}.sdf",
        table=f"{WORK}/{{batch}}/structures/shard-{{shard}}.csv",
    output:
        f"{WORK}/{{batch}}/electronic/shard-{{shard}}.csv",
    params:
        py=PY,
        cfg=sections("electronic", "execution"),
    threads: 1
    resources:
        mem_mb=1000,
        runtime=120,
    log:
        f"{LOGS}/{{batch}}/electronic/shard-{{shard}}.log",
    conda:
        "../envs/dascreen.yaml"
    shell:
        "OMP_NUM_THREADS={threads} {params.py} -m screen.stages --config {params.cfg:q} electronic"
        " --sdf {input.sdf:q} --table {input.table:q} --out {output:q} > {log:q} 2>&1"
