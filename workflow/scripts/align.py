# Thin wrapper: stage `align` (see lagsieve.stages.run_align).
from lagsieve.stages import logged, run_align

with logged(snakemake):
    run_align(snakemake.input.config, snakemake.output.annual, snakemake.output.notes)
