# Ranking against the configured partner: partner offsets, device model, filters, report.
# It reads only levels files (levels.csv + its sidecar, and a smiles: partner's own levels file from
# rules/partner.smk), so a new partner or device setting reruns this rule alone.
from importlib.util import find_spec
from pathlib import Path

from screen.partners import partner_slug
from screen.rank_io import ranking_folder

# the partner in words and a hash of the device and ranking settings (docs/contracts.md, section 5)
PARTNER_SLUG = ranking_folder(partner_slug(PARTNER), CFG)
RANKING_DIR = f"{OUT}/rankings/{PARTNER_SLUG}"
RANKING = f"{RANKING_DIR}/ranking.csv"
# report.html is an output only when the report module is installed; shortlist.sdf is not a declared output:
# it is written only when a shortlisted row has a structure (ranking.meta.json says why when it is not)
RANK_OUTPUTS = {
    "ranking": RANKING,
    "meta": f"{RANKING_DIR}/ranking.meta.json",
    **({"report": f"{RANKING_DIR}/report.html"} if find_spec("screen.report") else {}),
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
        partner=PARTNER,
        partner_levels=PARTNER_LEVELS or "",
        out=lambda wildcards, output: str(Path(output.ranking).parent.parent.parent),
    log:
        f"{LOGS}/rank/{PARTNER_SLUG}.log",
    conda:
        "../envs/dascreen.yaml"
    shell:
        "{params.py} -m screen.stages --config {params.cfg:q} rank --levels {input.levels:q}"
        " --partner {params.partner:q} --out {params.out:q} --partner-levels={params.partner_levels:q}"
        " > {log:q} 2>&1"
