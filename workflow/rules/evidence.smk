rule evidence:
    """Study-wide q-values, flags, grades and ranks."""
    input:
        config=cfg,
        annual=f"{OUT}/{{study}}/work/annual.csv",
        hypotheses=response_files("hypotheses.csv"),
        screens=response_files("screen.csv"),
    output:
        screen=f"{OUT}/{{study}}/screen.csv",
        evidence=f"{OUT}/{{study}}/evidence.csv",
    log:
        f"{OUT}/{{study}}/logs/evidence.log",
    conda:
        "../envs/lagsieve.yaml"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "../scripts/evidence.py"
