# lagsieve: screening workflow. Run the demo with `snakemake --cores 2` at the repository root,
# or any study with `lagsieve run CONFIG`. Rules live in workflow/rules/, one file per stage.
import sys
from pathlib import Path

sys.path.insert(0, str(Path(workflow.basedir) / "src"))

from lagsieve.plan import plan_studies

STUDIES = plan_studies(config)
OUT = config.get("out", "results")


wildcard_constraints:
    study=r"[a-z0-9_-]+",
    response=r"[A-Za-z0-9][A-Za-z0-9_.-]*",


include: "workflow/rules/common.smk"
include: "workflow/rules/screen.smk"
include: "workflow/rules/evidence.smk"
include: "workflow/rules/report.smk"


rule all:
    input:
        expand_all(),
    default_target: True
