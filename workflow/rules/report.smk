rule report:
    """The self-contained HTML report, its figures and the provenance record."""
    input:
        config=cfg,
        annual=f"{OUT}/{{study}}/work/annual.csv",
        notes=f"{OUT}/{{study}}/work/notes.csv",
        screen=f"{OUT}/{{study}}/screen.csv",
        evidence=f"{OUT}/{{study}}/evidence.csv",
        forecasts=response_files("forecasts.csv"),
        nulls=response_files("nulls.csv"),
    output:
        report=f"{OUT}/{{study}}/report.html",
        provenance=f"{OUT}/{{study}}/provenance.json",
        figures=directory(f"{OUT}/{{study}}/figures"),
    resources:
        mem_mb=2000,
        runtime=10,
    script:
        "../scripts/report.py"
