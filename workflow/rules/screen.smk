from lagsieve.stages.digest import settings_digest as _settings_digest


rule screen:
    """One response against all its drivers: lags, surrogates, rolling-origin forecasts. The
    config is a param, with the digest of the settings this screen reads, so that the job
    reruns when those change, not when a title, a label or another driver does."""
    input:
        data=lambda w: STUDIES[w.study].response_inputs[w.response],
        condition=condition_for_response,
    output:
        screen=f"{OUT}/{{study}}/work/responses/{{response}}/screen.csv",
        hypotheses=f"{OUT}/{{study}}/work/responses/{{response}}/hypotheses.csv",
        forecasts=f"{OUT}/{{study}}/work/responses/{{response}}/forecasts.csv",
        nulls=f"{OUT}/{{study}}/work/responses/{{response}}/nulls.csv",
        paired=f"{OUT}/{{study}}/work/responses/{{response}}/paired.csv",
    log:
        f"{OUT}/{{study}}/logs/screen/{{response}}.log",
    conda:
        "../envs/lagsieve.yaml"
    # one core per screen job, two jobs at once on two cores, rather than a two-process pool in
    # each job one after the other: less CPU (no pool to start, no results pickled back;
    # 18.6 s against 21.0-23.2 s for the demo's six screens) and the next job's start-up runs
    # beside a job that computes (DEVELOPERS.md, "Start-up and the allocator")
    threads: 1
    resources:
        mem_mb=1000,
        runtime=30,
    params:
        config=cfg,
        settings=lambda w: _settings_digest(
            STUDIES[w.study].study, "screen", w.response
        ),
    script:
        "../scripts/screen.py"
