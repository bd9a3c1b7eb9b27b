rule align:
    """Read and check every input; one annual axis for all series of the study."""
    input:
        config=cfg,
        data=lambda w: STUDIES[w.study].input_paths,
    output:
        annual=f"{OUT}/{{study}}/work/annual.csv",
        notes=f"{OUT}/{{study}}/work/notes.csv",
    log:
        f"{OUT}/{{study}}/logs/align.log",
    conda:
        "../envs/lagsieve.yaml"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "../scripts/align.py"
