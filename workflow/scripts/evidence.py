# Thin wrapper: stage `evidence` (see lagsieve.stages.run_evidence).
from pathlib import Path

from lagsieve.stages import logged, run_evidence

with logged(snakemake):
    run_evidence(snakemake.input.config, snakemake.input.annual, Path(snakemake.input.annual).parent,
                 snakemake.output.screen, snakemake.output.evidence)
