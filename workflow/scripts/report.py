# Thin wrapper: stage `report` (see lagsieve.stages.run_report).
from pathlib import Path

from lagsieve.stages import logged, run_report

with logged(snakemake):
    run_report(snakemake.input.config, snakemake.input.annual, snakemake.input.notes,
               Path(snakemake.input.annual).parent, snakemake.input.screen, snakemake.input.evidence,
               snakemake.output.report, snakemake.output.provenance, snakemake.output.figures,
               out_pdf=getattr(snakemake.output, "pdf", None), threads=snakemake.threads)
