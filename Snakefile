# Top-level entry for `snakemake --cores N` from a clone; the workflow itself is packaged
# in screen/workflow so that the installed `dascreen run` command uses the same rules.


configfile: "config/config.yaml"


include: "screen/workflow/Snakefile"
