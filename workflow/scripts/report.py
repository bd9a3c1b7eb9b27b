# Thin wrapper: stage `report` (see lagsieve.stages.run_report).
from pathlib import Path

from lagsieve.stages import run_report

run_report(snakemake.input.config, snakemake.input.annual, snakemake.input.notes,
           Path(snakemake.input.annual).parent, snakemake.input.screen, snakemake.input.evidence,
           snakemake.output.report, snakemake.output.provenance, snakemake.output.figures)
