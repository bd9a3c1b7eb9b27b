# Thin wrapper: stage `screen` for every response of a study (see lagsieve.stages.screen.run_screens).
from pathlib import Path

from lagsieve.stages.common import logged
from lagsieve.stages.screen import run_screens

with logged(snakemake):
    run_screens(snakemake.params.config, snakemake.params.reads, snakemake.output.responses,
                Path(snakemake.log[0]).with_suffix(""), threads=snakemake.threads)
