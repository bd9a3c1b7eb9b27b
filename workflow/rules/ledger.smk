rule ledger:
    """Forecast ledger: record next-year forecasts of strong and moderate hypotheses, score and
    supersede earlier ones. The ledger (default <out>/<study>/ledger.sqlite, config key
    ledger.path) is written as a side effect and is deliberately not a declared output, so
    `snakemake --delete-all-output` and forced reruns never remove it; the declared output is
    the summary of this update."""
    input:
        config=cfg,
        annual=f"{OUT}/{{study}}/work/annual.csv",
        evidence=f"{OUT}/{{study}}/evidence.csv",
    output:
        summary=f"{OUT}/{{study}}/work/ledger_update.json",
    log:
        f"{OUT}/{{study}}/logs/ledger.log",
    conda:
        "../envs/lagsieve.yaml"
    resources:
        mem_mb=1000,
        runtime=10,
    script:
        "../scripts/ledger.py"
