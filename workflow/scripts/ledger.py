# Thin wrapper: stage `ledger` (see lagsieve.ledger.update_ledger).
from pathlib import Path

from lagsieve.ledger import update_ledger
from lagsieve.stages import logged

with logged(snakemake):
    update_ledger(snakemake.input.config, snakemake.input.annual, snakemake.input.evidence,
                  Path(snakemake.input.evidence).parent, snakemake.output.summary)
