# Thin wrapper: every stage of a chunk of studies (see lagsieve.stages.batch.run_batch).
from lagsieve.stages.batch import run_batch
from lagsieve.stages.common import logged
from lagsieve.stages.plan import plan_studies

with logged(snakemake):
    planned = plan_studies({"studies": snakemake.params.configs}, check=False)
    run_batch(list(planned.values()), snakemake.params.out, snakemake.output[0], threads=snakemake.threads)
