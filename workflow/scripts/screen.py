# Thin wrapper: stage `screen` for one response (see lagsieve.pipeline.run_screen).
from pathlib import Path

from lagsieve.pipeline import logged, run_screen

with logged(snakemake):
    run_screen(snakemake.input.config, None, snakemake.wildcards.response,
               Path(snakemake.output.screen).parent, threads=snakemake.threads, files=list(snakemake.input.data),
               condition=list(snakemake.input.condition))
