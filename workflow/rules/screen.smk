from lagsieve.stages.digest import settings_digest as _settings_digest


rule screen:
    """Every response of a study against its drivers: lags, surrogates, rolling-origin
    forecasts, in one job (lagsieve.stages.screen.run_screens). The job reruns when any of its
    responses' input files or settings change; inside it, a response whose content key is
    unchanged (its settings, the bytes it reads, the code) is copied from work/cache/screen/
    instead of screened again (lagsieve.stages.screen_cache). The config is a param, with the
    digest of the settings each response's screen reads, so that the job reruns when those
    change, not when a title or a label does."""
    input:
        data=screen_inputs,
        condition=condition_for_screen,
    output:
        # one folder per response: screen, hypotheses, forecasts, nulls and paired.csv; a
        # folder, since the number of responses differs between studies
        responses=directory(f"{OUT}/{{study}}/work/responses"),
    log:
        f"{OUT}/{{study}}/logs/screen.log",
    conda:
        "../envs/lagsieve.yaml"
    # the responses to do are screened two at a time in processes forked after the imports:
    # one job's start and imports for the study, not one per response (DEVELOPERS.md)
    threads: 2
    resources:
        mem_mb=2000,
        # minutes: 30 per pair of responses (two screened at once), as one response's job had
        runtime=lambda w: 30 * ((len(STUDIES[w.study].response_slugs) + 1) // 2),
    params:
        config=cfg,
        settings=lambda w: {
            r: _settings_digest(STUDIES[w.study].study, "screen", r)
            for r in STUDIES[w.study].response_slugs
        },
        reads=screen_reads,
    script:
        "../scripts/screen.py"
