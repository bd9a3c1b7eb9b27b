"""The report's block of the state-space refits (``screen.state_space: true``): per hypothesis
graded weak or better, the screen's slope beside the slope under known observation error and
AR(1) process error (:mod:`lagsieve.evidence.statespace`), phi and the share of the variance
that is observation error; the skipped responses named once. Plain data for
``templates/statespace.html``."""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.formats import is_missing, number, text


def _slope(value, se) -> str:
    """A slope and its standard error to the same decimals, two significant digits of the se."""
    if is_missing(value):
        return ""
    if is_missing(se) or not float(se) > 0:
        return number(value, "{:+.3g}")
    d = int(np.clip(1 - np.floor(np.log10(float(se))), 0, 8))
    return f"{number(value, f'{{:+.{d}f}}')} ± {number(se, f'{{:.{d}f}}')}"


def section(evidence: pd.DataFrame, label) -> dict | None:
    """Rows of the fitted hypotheses and the skipped responses with their reason; None when
    the run made no state-space fit (the key is off, or no hypothesis was graded weak or better)."""
    if "ss_status" not in evidence:
        return None
    status = evidence["ss_status"].astype(object).fillna("").astype(str)
    done = evidence[status.str.startswith("ok")]
    rows = [{"response": label(r["response"]), "driver": label(r["driver"]), "lag": number(r["lag"], "{:.0f}"),
             "grade": text(r["grade"]), "screen": _slope(r["slope"], r["slope_se"]),
             "state_space": _slope(r["ss_slope"], r["ss_slope_se"]), "phi": number(r["ss_phi"], "{:+.2f}"),
             "obs_share": number(r["ss_obs_share"], "{:.0%}"), "n": number(r["ss_n"], "{:.0f}"),
             "note": "" if r["ss_status"] == "ok" else r["ss_status"].removeprefix("ok: ")}
            for _, r in done.iterrows()]
    other = evidence[(status != "") & ~status.str.startswith("ok")]
    skipped = sorted({(label(r["response"]), r["ss_status"]) for _, r in other.iterrows()})
    if not rows and not skipped:
        return None
    return {"rows": rows, "skipped": [{"response": s, "reason": why} for s, why in skipped]}
