# Thin wrapper: stage `screen` for one response (see lagsieve.stages.screen.run_screen).
from pathlib import Path

from lagsieve.stages.common import logged
from lagsieve.stages.screen import run_screen

with logged(snakemake):
    run_screen(snakemake.params.config, None, snakemake.wildcards.response,
               Path(snakemake.output.screen).parent, threads=snakemake.threads, files=list(snakemake.input.data),
               condition=list(snakemake.input.condition))
