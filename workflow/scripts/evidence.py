# Thin wrapper: stages `align` and `evidence` (see lagsieve.stages.evidence.run_align, run_evidence).
from pathlib import Path

from lagsieve.stages.common import logged
from lagsieve.stages.evidence import run_align, run_evidence

with logged(snakemake):
    run_align(snakemake.params.config, snakemake.output.annual, snakemake.output.notes,
              condition=list(snakemake.input.condition))
    run_evidence(snakemake.params.config, snakemake.output.annual, Path(snakemake.output.annual).parent,
                 snakemake.output.screen, snakemake.output.evidence, threads=snakemake.threads)
