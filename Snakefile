# Top-level entry for `snakemake --cores N` from a clone; the workflow itself is packaged
# in screen/workflow so that the installed `dascreen run` command uses the same rules.


configfile: "config/config.yaml"


include: "screen/workflow/Snakefile"


# The included workflow's `all` is not the default target of an including Snakefile, so `snakemake --cores N`
# here would do nothing; name it.
rule default:
    input:
        rules.all.input,
    default_target: True
