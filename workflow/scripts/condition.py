# Thin wrapper: stage `condition` (see lagsieve.pipeline.run_condition).
from lagsieve.pipeline import logged, run_condition

with logged(snakemake):
    run_condition(snakemake.params.config, snakemake.output.table, snakemake.output.sensitivity,
                  snakemake.output.fish, snakemake.output.fit)
