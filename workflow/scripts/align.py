# Thin wrapper: stage `align` (see lagsieve.stages.run_align).
from lagsieve.stages import run_align

run_align(snakemake.input.config, snakemake.output.annual, snakemake.output.notes)
