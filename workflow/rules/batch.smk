# Batches of studies (`batch: K` in Snakemake's config; see lagsieve.stages.batch): one job
# per chunk of K studies runs every stage of each of them in one process and writes every
# study's outputs and logs where the per-stage rules write them.


def batch_inputs(wildcards):
    """The configs, input files and sample files of a chunk's studies."""
    files = []
    for sid in BATCHES[wildcards.chunk]:
        p = STUDIES[sid]
        files += [p.config_path, *p.input_paths, *p.sample_paths]
    return files


rule batch:
    """Every stage (condition, screen, align and evidence, ledger and report) of a chunk of
    studies, one study after the other in one process; a study whose config and inputs have
    not changed since this chunk last ran it is left as it is."""
    input:
        batch_inputs,
    output:
        f"{OUT}/batches/{{chunk}}.json",
    log:
        f"{OUT}/logs/batch-{{chunk}}.log",
    conda:
        "../envs/lagsieve.yaml"
    threads: 1
    resources:
        mem_mb=1500,
        runtime=lambda w: 2 + 2 * len(BATCHES[w.chunk]),
    params:
        configs=lambda w: [STUDIES[sid].config_path for sid in BATCHES[w.chunk]],
        out=OUT,
    script:
        "../scripts/batch.py"
