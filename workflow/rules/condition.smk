rule condition:
    """Condition series from per-fish samples (stage `condition`): the length-weight reference,
    Kn, haul-aware indices per year x season x age group, the season-adjusted annual index, the
    poor-condition share with its haul bootstrap and the threshold sensitivity. Its inputs are
    the sample files and its params the condition section and the seed, so it reruns only when
    they change."""
    input:
        samples=lambda w: STUDIES[w.study].sample_paths,
    output:
        table=f"{OUT}/{{study}}/condition.csv",
        sensitivity=f"{OUT}/{{study}}/condition_sensitivity.csv",
        fish=f"{OUT}/{{study}}/work/condition_fish.csv",
        fit=f"{OUT}/{{study}}/work/condition_fit.json",
    log:
        f"{OUT}/{{study}}/logs/condition.log",
    conda:
        "../envs/lagsieve.yaml"
    resources:
        mem_mb=2000,
        runtime=10,
    params:
        config=cfg,
        section=lambda w: STUDIES[w.study].condition,
        seed=lambda w: STUDIES[w.study].study.screen["seed"],
    script:
        "../scripts/condition.py"
