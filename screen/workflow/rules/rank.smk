# Ranking against the configured partner: partner offsets, device model, filters, report.
# It reads only levels files (levels.csv + its sidecar, and a smiles: partner's own levels file from
# rules/partner.smk), so a new partner or device setting reruns this rule alone.
from importlib.util import find_spec
from pathlib import Path

from screen.partners import partner_slug
from screen.rank_io import ranking_folder

# A direct snakemake run checks its partner before any job, as `dascreen run` does (screen.preflight): a levels
# scale the partner is not on, a partner without a role among candidates of both roles, an id: partner that is no
# candidate, an unknown library name; before, the ranking job found them after every level was computed. A run
# started by dascreen was checked by the command.
if MAIN and not LAUNCHED:
    from screen.preflight import check_partner_scales, check_partners, check_run_partners

    try:
        _candidates = INPUTS["candidates"] if os.path.isfile(INPUTS["candidates"]) else None
        check_partners([PARTNER], role=CFG["rank"]["role"], roles_of=_candidates)
        check_partner_scales([PARTNER], CFG["levels"]["scale"])
        if _candidates:  # a missing candidate file is Snakemake's own "Missing input files" of the prepare job
            check_run_partners([PARTNER], _candidates, CFG["rank"])
    except DascreenError as exc:
        refuse(exc)

# the partner in words and a hash of the device and ranking settings (docs/contracts.md, section 5)
PARTNER_SLUG = ranking_folder(partner_slug(PARTNER), CFG)
RANKING_DIR = f"{OUT}/rankings/{PARTNER_SLUG}"
RANKING = f"{RANKING_DIR}/ranking.csv"
# report.html and ranking.safe.csv are outputs only when the report module is installed (it writes both).
# Not declared: shortlist.sdf, written only when a shortlisted row has a structure (else an old one is removed and
# ranking.meta.json says why), and OUT/rankings-index.csv, which every ranking of the folder rewrites (other
# partners' rank jobs, `dascreen rank`): one job cannot own it, and Snakemake removes a declared output before
# its job runs.
RANK_OUTPUTS = {
    "ranking": RANKING,
    "meta": f"{RANKING_DIR}/ranking.meta.json",
    **({"report": f"{RANKING_DIR}/report.html", "safe": f"{RANKING_DIR}/ranking.safe.csv"}
       if find_spec("screen.report") else {}),
}
# a file partner is an input too, so editing it reruns the ranking; a smiles: partner's levels file
# is made by its own batch
RANK_INPUTS = {
    "levels": LEVELS,
    "meta": f"{LEVELS}.meta.json",
    **({"partner": PARTNER} if PARTNER_KIND == "file" else {}),
    **({"partner_levels": PARTNER_LEVELS} if PARTNER_LEVELS else {}),
}


rule rank:
    input:
        **RANK_INPUTS,
    output:
        **RANK_OUTPUTS,
    params:
        py=PY,
        cfg=sections("partner", "device", "rank"),
        # the input itself when the partner is a file (the input decides re-runs; a param equal to it is a lint)
        partner=(lambda wildcards, input: input.partner) if "partner" in RANK_INPUTS else PARTNER,
        partner_levels=(lambda wildcards, input: input.partner_levels) if PARTNER_LEVELS else "",
        out=lambda wildcards, output: str(Path(output.ranking).parent.parent.parent),
    resources:
        mem_mb=2000,
        runtime=15,
    log:
        f"{LOGS}/rank/{PARTNER_SLUG}.log",
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} rank --levels {input.levels:q}"
        " --partner {params.partner:q} --out {params.out:q} --partner-levels={params.partner_levels:q}"
        " > {log:q} 2>&1"
