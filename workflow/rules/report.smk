# The report job: first the forecast ledger's update (stage `ledger`), then the report stage:
# self-contained HTML, figures and tables (figures/), provenance and, unless the study config
# sets `report.pdf: false`, a PDF copy (report.pdf beside the HTML).
# report.pdf (and the editable report.docx) is a declared output when every study of the run
# wants it; in a run that mixes studies with and without it, the files are still written but
# not tracked by Snakemake.
from lagsieve.stages.plan import docx_wanted as _docx_wanted
from lagsieve.stages.plan import pdf_wanted as _pdf_wanted
from lagsieve.stages import catalog as _catalog

REPORT_INPUT = dict(
    config=cfg,
    annual=f"{OUT}/{{study}}/work/annual.csv",
    notes=f"{OUT}/{{study}}/work/notes.csv",
    screen=f"{OUT}/{{study}}/screen.csv",
    evidence=f"{OUT}/{{study}}/evidence.csv",
    conditional=f"{OUT}/{{study}}/conditional.csv",
    models=f"{OUT}/{{study}}/models.csv",
    joint=f"{OUT}/{{study}}/joint.csv",
    joint_groups=f"{OUT}/{{study}}/joint_groups.csv",
    windows=f"{OUT}/{{study}}/windows.csv",
    responses=responses_dir,  # the screen's forecasts and nulls of every response
    condition=condition_outputs(
        "condition.csv",
        "condition_sensitivity.csv",
        "work/condition_fish.csv",
        "work/condition_fit.json",
    ),
)
REPORT_OUTPUT = {
    "report": report(
        f"{OUT}/{{study}}/report.html",
        caption="../report/report_html.rst",
        category="Report",
        labels={"study": "{study}", "file": "report (HTML)"},
    ),
    "provenance": f"{OUT}/{{study}}/provenance.json",
    # The ledger (default <out>/<study>/ledger.sqlite, config key ledger.path) is written as a
    # side effect and is deliberately not a declared output, so `snakemake --delete-all-output`
    # and forced reruns never remove it; the declared output is the summary of this update.
    "ledger": f"{OUT}/{{study}}/work/ledger_update.json",
    "figures": report(
        directory(f"{OUT}/{{study}}/figures"),
        patterns=_catalog.FIGURE_PATTERNS,  # response, driver and kind read off each file's name
        caption="../report/figures.rst",  # one caption per kind of figure
        category="Figures",
        subcategory=lambda w: _catalog.figure_labels(STUDIES[w.study].study, w)[
            "figure"
        ],
        labels=lambda w: _catalog.figure_labels(STUDIES[w.study].study, w),
    ),
}
if STUDIES and all(_pdf_wanted(p.study) for p in STUDIES.values()):
    REPORT_OUTPUT["pdf"] = report(
        f"{OUT}/{{study}}/report.pdf",
        caption="../report/report_pdf.rst",
        category="Report",
        labels={"study": "{study}", "file": "report (PDF)"},
    )
if STUDIES and all(_docx_wanted(p.study) for p in STUDIES.values()):
    REPORT_OUTPUT["docx"] = f"{OUT}/{{study}}/report.docx"


rule report:
    """Forecast ledger (record the next-year forecast of every hypothesis that can forecast,
    score and supersede earlier ones), then the self-contained HTML report, its figures and
    tables, the PDF copy, the editable annex document and provenance."""
    input:
        **REPORT_INPUT,
    output:
        **REPORT_OUTPUT,
    log:
        f"{OUT}/{{study}}/logs/report.log",
    conda:
        "../envs/lagsieve.yaml"
    threads: 2
    resources:
        mem_mb=2000,
        runtime=10,
    script:
        "../scripts/report.py"
