# Thin wrapper: stage `condition` (see lagsieve.stages.condition.run_condition).
from lagsieve.stages.common import logged
from lagsieve.stages.condition import run_condition

with logged(snakemake):
    run_condition(snakemake.params.config, snakemake.output.table, snakemake.output.sensitivity,
                  snakemake.output.fish, snakemake.output.fit)
