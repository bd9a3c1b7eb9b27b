"""The generated texts of the invented demo: its YAML configuration and TRUTH.md.

Both come from the Jinja2 templates in ``lagsieve/demo/templates`` (plain text, so no
autoescape), fed with plain data: the config with the data folder and the seed, TRUTH.md
with the parameters, the truth table and the check of the realisation.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np
from jinja2 import Environment, PackageLoader, StrictUndefined

from lagsieve.demo.estimates import (DRAW_PHI, DRAWS_GROUP, N_DRAWS, RESTATE_SD, RETRO_BIAS, RETRO_DECAY,
                                     vintages_table)
from lagsieve.demo.check import association_check
from lagsieve.demo.fish import AGE_GROUPS, CONDITION, PREY_BETA, SEASON_EFFECT
from lagsieve.demo.world import (
    CLIMATE_YEARS,
    DEFAULT_SEED,
    DIP_WINDOWS,
    DRIVER_IDS,
    DRIVER_YEARS,
    DRIVERS,
    GAPS,
    GROUPS,
    HOLDOUT_YEARS,
    LATE_DIP_WINDOW,
    MISSING_MONTHS,
    RESPONSE_IDS,
    RESPONSE_YEARS,
    ROLES,
    DemoData,
)

__all__ = ["DEMO_CONFIG_TEXT", "demo_config_text", "truth_context", "truth_markdown"]


def _code(value) -> str:
    """Markdown inline code."""
    return f"`{value}`"


def _trimmed(x, nd: int = 3) -> str:
    """A float with ``nd`` decimals, trailing zeros (and a trailing point) dropped."""
    return f"{x:.{nd}f}".rstrip("0").rstrip(".") if isinstance(x, float) else str(x)


@lru_cache(maxsize=1)
def _environment() -> Environment:
    env = Environment(loader=PackageLoader("lagsieve.demo", "templates"),
                      autoescape=False,  # YAML and Markdown, not HTML
                      keep_trailing_newline=True, trim_blocks=True, lstrip_blocks=True,
                      undefined=StrictUndefined)
    env.filters["code"] = _code
    env.filters["trimmed"] = _trimmed
    return env


def _render(name: str, **context) -> str:
    return _environment().get_template(name).render(**context)


# --------------------------------------------------------------------------- config text

def demo_config_text(data_dir: str = "resources/demo") -> str:
    """The commented YAML configuration of the demo study.

    ``data_dir`` is the folder of the data files relative to the folder of the config file
    (``"../resources/demo"`` for ``config/config.yaml`` in the repository, ``"data"`` for a
    study created by ``lagsieve init DIR``).
    """
    folder = str(data_dir).replace("\\", "/").rstrip("/") or "."
    return _render("config.yaml.j2", data_dir=folder, seed=DEFAULT_SEED,
                   climate_start=int(CLIMATE_YEARS[0]))


#: The demo configuration for data in ``resources/demo`` (relative to the config's folder).
DEMO_CONFIG_TEXT = demo_config_text()


# --------------------------------------------------------------------------- TRUTH.md

def _span(years: np.ndarray) -> dict:
    return {"first": int(years[0]), "last": int(years[-1]), "count": int(years.size)}


def _truth_rows(data: DemoData) -> list[dict]:
    """One row per driver: its category, role, and per response the true effect (if any)."""
    tt = data.truth.set_index(["driver", "response"])
    categories = {d[0]: d[1] for d in DRIVERS}
    rows = []
    for d in DRIVER_IDS:
        cells = []
        for rid in RESPONSE_IDS:
            row = tt.loc[(d, rid)]
            effect = bool(row["true_effect"])
            cells.append({"effect": effect, "shape": row["shape"],
                          "lag": int(row["lag"]) if effect else None})
        rows.append({"driver": d, "category": categories[d], "role": ROLES[d], "cells": cells})
    return rows


def _check_rows(data: DemoData) -> list[dict]:
    """One row per driver: (r, lag) naive for every response, then detrended for every one."""
    chk = association_check(data)
    rows = []
    for d in DRIVER_IDS:
        sub = chk[chk["driver"] == d].set_index("response")
        cells = [(float(sub.loc[r, f"{kind}_r"]), int(sub.loc[r, f"{kind}_lag"]))
                 for kind in ("naive", "detrended") for r in RESPONSE_IDS]
        rows.append({"driver": d, "cells": cells})
    return rows


#: The decoys that echo no true driver (oxygen and shrimp echo temperature and forage fish).
INDEPENDENT_DECOYS = ("jellyfish_index", "zooplankton_index", "pinniped_abundance", "fishing_mortality",
                      "shelf_climate_index")


def _largest_decoy_r(data: DemoData, response: str) -> dict:
    """The independent decoy with the largest detrended |r| (best lag) with ``response``."""
    chk = association_check(data)
    sub = chk[(chk["response"] == response) & chk["driver"].isin(INDEPENDENT_DECOYS)]
    row = sub.loc[sub["detrended_r"].abs().idxmax()]
    return {"driver": row["driver"], "r": float(row["detrended_r"]), "lag": int(row["detrended_lag"])}


def _estimate_context(data: DemoData) -> dict:
    """The draws and vintages of the demo (:mod:`lagsieve.demo.estimates`) with their Mohn's rho."""
    vint = vintages_table(data.mortality, data.seed)
    g = data.mortality[data.mortality["group"] == DRAWS_GROUP]
    latest = dict(zip(g["year"].astype(int), g["value"].astype(float)))
    peels = []
    for v, rows in vint.groupby("vintage"):
        ty = int(rows["year"].max())
        peels.append((int(v), ty, (float(rows["value"].iloc[-1]) - latest[ty]) / latest[ty]))
    return {"group": DRAWS_GROUP, "n_draws": N_DRAWS, "phi": DRAW_PHI, "bias": RETRO_BIAS,
            "decay": RETRO_DECAY, "restate_sd": RESTATE_SD, "vintages": sorted(vint["vintage"].unique()),
            "peels": peels, "rho": sum(p[2] for p in peels) / len(peels)}


def truth_context(data: DemoData) -> dict:
    """The plain data TRUTH.md is rendered from."""
    P = data.parameters
    effects = data.truth[data.truth["true_effect"]]
    return {
        "seed": data.seed,
        "response_years": _span(RESPONSE_YEARS),
        "driver_years": _span(DRIVER_YEARS),
        "climate_years": _span(CLIMATE_YEARS),
        "groups": list(GROUPS),
        "gaps": [(series, list(years)) for series, years in GAPS.items()],
        "missing_months": list(MISSING_MONTHS),
        "dip_windows": list(DIP_WINDOWS),
        "late_window": LATE_DIP_WINDOW,
        "holdout": HOLDOUT_YEARS,
        "p": P,
        "levels": {k: float(np.exp(P[k]["log_mean"]))
                   for k in ("forage", "shrimp", "jellyfish", "zooplankton")},
        "responses": [{"id": rid, **P[rid]} for rid in RESPONSE_IDS],
        "response_ids": list(RESPONSE_IDS),
        "truth_rows": _truth_rows(data),
        "effects": effects[["driver", "response", "size"]].to_dict("records"),
        "check_rows": _check_rows(data),
        "decoy_older": _largest_decoy_r(data, "m:age5plus"),
        "estimates": _estimate_context(data),
        "fish": {"n": len(data.fish), "first": int(data.fish["year"].min()), "last": int(data.fish["year"].max()),
                 "groups": AGE_GROUPS, "beta": PREY_BETA, "seasons": SEASON_EFFECT, **CONDITION},
    }


def truth_markdown(data: DemoData) -> str:
    """The text of TRUTH.md for ``data`` (generated, so it always matches the data)."""
    return _render("TRUTH.md.j2", **truth_context(data))
