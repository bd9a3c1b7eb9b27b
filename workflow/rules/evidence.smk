from lagsieve.io.studyfiles import estimate_paths as _estimate_paths


rule evidence:
    """Align every input of the study on one annual axis (stage `align`), then study-wide
    q-values, flags, grades and ranks (stage `evidence`). The two stages share one job so that
    a study costs three jobs (four with a condition section)."""
    input:
        data=lambda w: STUDIES[w.study].input_paths,
        estimates=lambda w: _estimate_paths(
            STUDIES[w.study].study.responses, STUDIES[w.study].study.base_dir
        ),
        condition=condition_outputs("condition.csv"),
        # the samples' warnings, recorded by the condition stage, which align reports (run_align)
        condition_fit=condition_outputs("work/condition_fit.json"),
        responses=responses_dir,  # the screen's tables: hypotheses, screen and paired.csv
    output:
        annual=f"{OUT}/{{study}}/work/annual.csv",
        notes=f"{OUT}/{{study}}/work/notes.csv",
        screen=f"{OUT}/{{study}}/screen.csv",
        evidence=f"{OUT}/{{study}}/evidence.csv",
        conditional=f"{OUT}/{{study}}/conditional.csv",
        models=f"{OUT}/{{study}}/models.csv",
        joint=f"{OUT}/{{study}}/joint.csv",
        joint_groups=f"{OUT}/{{study}}/joint_groups.csv",
        windows=f"{OUT}/{{study}}/windows.csv",
    log:
        f"{OUT}/{{study}}/logs/evidence.log",
    conda:
        "../envs/lagsieve.yaml"
    # two of the evidence stage's parts run in a forked process beside the others (stages.aside):
    # on the demo the job's stage took 2.1-2.8 s of wall time against 3.2-4.8 s on one core
    threads: 2
    resources:
        mem_mb=1000,
        runtime=10,
    params:
        config=cfg,  # a param with the digest of what the stages read: a new title reruns only the report
        settings=lambda w: _settings_digest(STUDIES[w.study].study, "evidence"),
    script:
        "../scripts/evidence.py"
