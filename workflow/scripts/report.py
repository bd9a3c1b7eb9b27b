# Thin wrapper: stages `ledger` and `report` (see lagsieve.ledger.update.update_ledger,
# lagsieve.stages.report.run_report). The ledger is updated first: the report shows its changes.
from pathlib import Path

from lagsieve.ledger.update import update_ledger
from lagsieve.stages.common import logged
from lagsieve.stages.report import run_report

with logged(snakemake):
    update_ledger(snakemake.input.config, snakemake.input.annual, snakemake.input.evidence,
                  Path(snakemake.input.evidence).parent, snakemake.output.ledger)
    run_report(snakemake.input.config, snakemake.input.annual, snakemake.input.notes,
               Path(snakemake.input.annual).parent, snakemake.input.screen, snakemake.input.evidence,
               snakemake.output.report, snakemake.output.provenance, snakemake.output.figures,
               out_pdf=getattr(snakemake.output, "pdf", None), threads=snakemake.threads,
               condition=list(snakemake.input.condition))
