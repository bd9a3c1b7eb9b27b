"""Stage `condition`: the condition series from per-fish samples (:func:`run_condition`)."""
from __future__ import annotations

import time

from lagsieve.condition.series import read_condition
from lagsieve.io.config import load_study
from lagsieve.io.files import write_csv, write_json
from lagsieve.stages.check import condition_settings


def run_condition(config_path, out_table, out_sensitivity, out_fish, out_fit) -> None:
    """Stage `condition`: the condition series (condition.csv), the threshold sensitivity, and for
    the report the fish with their log Kn and the reference fit with the season effects."""
    study = load_study(config_path)
    settings = condition_settings(study)
    res = read_condition(settings, study.base_dir, study.screen["seed"], str(study.path), time.perf_counter)
    write_csv(res.table, out_table)
    write_csv(res.sensitivity, out_sensitivity)
    fish = res.fish[["year", "month", "group", "season", "length", "weight", "log_kn"]].rename(columns={"group": "age_group"})
    write_csv(fish, out_fish)
    write_json({"reference": dict(vars(res.reference)), "season_effects": res.season_effects.to_dict("records"),
                "settings": {"threshold": settings.threshold, "thresholds": list(settings.thresholds),
                             "bootstrap": settings.bootstrap, "age_groups": {k: list(v) for k, v in settings.age_groups.items()},
                             "seasons": {k: list(v) for k, v in settings.seasons.items()}},
                "warnings": [w.line() for w in res.warnings], "timings": res.timings,
                "sample_warnings": [{"what": w.what, "file": w.file, "series": w.series}  # for align's check
                                    for w in res.sample_warnings]}, out_fit)
