"""The report's condition section (issue 18): the condition stage's outputs read back
(:func:`read_outputs`), the figures planned from them (:func:`plan_condition`) and the plain data
its template shows (:func:`section`). Nothing here when the study has no ``condition:`` section."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.formats import number
from lagsieve.report import figures as fg

__all__ = ["FIT_SAMPLE", "plan_condition", "read_outputs", "section"]

FIT_SAMPLE = 4000  # fish drawn in the log-log panel (all fish enter the fit and the box plots)
Z95 = 1.959963984540054  # the normal 97.5% quantile: intervals value +- z se


def read_outputs(paths) -> dict | None:
    """The stage's files (condition.csv, condition_sensitivity.csv, condition_fish.csv,
    condition_fit.json, matched by name) as frames and a dict; None without them."""
    by_name = {Path(p).name: Path(p) for p in (paths or [])}
    if "condition.csv" not in by_name:
        return None
    fit = json.loads(by_name["condition_fit.json"].read_text(encoding="utf-8"))
    return {"table": pd.read_csv(by_name["condition.csv"], keep_default_na=False, na_values=[""]),
            "sensitivity": pd.read_csv(by_name["condition_sensitivity.csv"]),
            "fish": pd.read_csv(by_name["condition_fish.csv"], keep_default_na=False, na_values=[""]),
            **fit}


def _annual(table: pd.DataFrame, kind: str) -> pd.DataFrame:
    return table[(table["kind"] == kind) & (table["season"].fillna("") == "")]


def _index_panels(table: pd.DataFrame, groups: list[str], threshold: float) -> list[dict]:
    panels = []
    for kind, title, ylabel in (("kn", "Relative condition Kn (season-adjusted)", "Kn"),
                                ("below", f"Share below Kn = {threshold:g} (season-adjusted)", "share of fish")):
        rows = _annual(table, kind)
        lines = []
        for g in groups:
            r = rows[rows["age_group"] == g].sort_values("year")
            v, se = r["value"].to_numpy(float), r["se"].to_numpy(float)
            lines.append({"group": g, "years": r["year"].to_numpy(int), "value": v,
                          "low": v - Z95 * se, "high": v + Z95 * se})
        panels.append({"title": title, "ylabel": ylabel, "lines": lines})
    return panels


def _fit_job(out: dict, invented: bool, seed: int) -> fg.FigureJob:
    fish = out["fish"]
    rng = np.random.default_rng(seed)
    pick = rng.choice(len(fish), min(FIT_SAMPLE, len(fish)), replace=False) if len(fish) else []
    sample = fish.iloc[np.sort(pick)]
    seasons = list(out["settings"]["seasons"])
    ref = out["reference"]
    return fg.FigureJob("condition_fit", "condition_fit", dict(
        log_length=np.log(sample["length"].to_numpy(float)), log_weight=np.log(sample["weight"].to_numpy(float)),
        log_a=float(ref["log_a"]), b=float(ref["b"]), seasons=seasons,
        residuals=[fish.loc[fish["season"] == s, "log_kn"].to_numpy(float) for s in seasons], invented=invented))


def _design_job(out: dict, groups: list[str], invented: bool) -> fg.FigureJob:
    seasons = list(out["settings"]["seasons"])
    eff = pd.DataFrame(out["season_effects"])
    effects = {g: [float(eff[(eff.age_group == g) & (eff.season == s)]["effect"].sum()) for s in seasons]
               for g in groups}
    kn = _annual(out["table"], "kn")
    years = np.sort(kn["year"].unique())
    design = {g: kn[kn["age_group"] == g].set_index("year")["design_effect"].reindex(years).to_numpy(float)
              for g in groups}
    return fg.FigureJob("condition_design", "condition_design", dict(
        seasons=seasons, effects=effects, years=years, design=design, invented=invented))


def _sensitivity_job(out: dict, groups: list[str], invented: bool) -> fg.FigureJob:
    sens = out["sensitivity"]
    thresholds = sorted(sens["threshold"].unique())
    years = np.sort(sens["year"].unique())
    shares = {}
    for g in groups:
        rows = sens[sens["series"] == f"below:{g}"]
        shares[g] = np.stack([rows[rows["threshold"] == t].set_index("year")["value"].reindex(years).to_numpy(float)
                              for t in thresholds])
    return fg.FigureJob("condition_sensitivity", "condition_sensitivity", dict(
        groups=groups, thresholds=[float(t) for t in thresholds], years=years, shares=shares,
        chosen=float(out["settings"]["threshold"]), invented=invented))


def plan_condition(out: dict | None, invented: bool, seed: int) -> list[fg.FigureJob]:
    """The condition section's figure jobs (none without the stage's outputs)."""
    if out is None:
        return []
    groups = list(out["settings"]["age_groups"])
    return [_fit_job(out, invented, seed),
            fg.FigureJob("condition_indices", "condition_indices", dict(
                panels=_index_panels(out["table"], groups, float(out["settings"]["threshold"])), invented=invented)),
            _design_job(out, groups, invented), _sensitivity_job(out, groups, invented)]


def section(out: dict | None) -> dict | None:
    """The plain data of the condition section (templates/condition.html)."""
    if out is None:
        return None
    ref, st, table = out["reference"], out["settings"], out["table"]
    kn = _annual(table, "kn")
    rows = [[g, str(int(r["n_fish"].sum())), str(int(r["n_sets"].sum())),
             number(float(np.nanmedian(r["design_effect"])), "{:.3g}") if r["design_effect"].notna().any() else "",
             number(float(np.nanmedian(r["se"])), "{:.3g}") if r["se"].notna().any() else ""]
            for g in st["age_groups"] for r in [kn[kn["age_group"] == g]]]
    return {"a": number(float(ref["a"]), "{:.4g}"), "b": number(float(ref["b"]), "{:.4g}"), "se_b": number(float(ref["se_b"]), "{:.2g}"),
            "ref_years": ref["years"], "ref_fish": int(ref["n_fish"]), "downweighted": int(ref["downweighted"]),
            "n_fish": len(out["fish"]), "threshold": st["threshold"], "thresholds": st["thresholds"],
            "bootstrap": st["bootstrap"], "groups": st["age_groups"], "seasons": st["seasons"],
            "series": sorted(table["series"].unique()), "warnings": out.get("warnings", []),
            "group_header": ("age group", "fish", "hauls", "median design effect", "median se of Kn"),
            "group_rows": rows}
