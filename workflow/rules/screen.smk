rule screen:
    """One response against all its drivers: lags, surrogates, rolling-origin forecasts."""
    input:
        config=cfg,
        data=lambda w: STUDIES[w.study].response_inputs[w.response],
        condition=condition_for_response,
    output:
        screen=f"{OUT}/{{study}}/work/responses/{{response}}/screen.csv",
        hypotheses=f"{OUT}/{{study}}/work/responses/{{response}}/hypotheses.csv",
        forecasts=f"{OUT}/{{study}}/work/responses/{{response}}/forecasts.csv",
        nulls=f"{OUT}/{{study}}/work/responses/{{response}}/nulls.csv",
    log:
        f"{OUT}/{{study}}/logs/screen/{{response}}.log",
    conda:
        "../envs/lagsieve.yaml"
    threads: 2
    resources:
        mem_mb=1000,
        runtime=30,
    script:
        "../scripts/screen.py"
