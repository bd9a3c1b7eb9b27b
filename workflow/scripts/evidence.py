# Thin wrapper: stage `evidence` (see lagsieve.stages.run_evidence).
from pathlib import Path

from lagsieve.stages import run_evidence

run_evidence(snakemake.input.config, snakemake.input.annual, Path(snakemake.input.annual).parent,
             snakemake.output.screen, snakemake.output.evidence)
