"""Season hypotheses in the evidence stage (config ``by_season``).

A season response is one more response of the study: its hypotheses enter the study-wide
false-discovery control one by one, like every other hypothesis, and are graded by the same
rules. A monthly driver of a season response is lagged in seasons, which the annual table
cannot express as a shift in years; so while the evidence is built, each such hypothesis reads
its driver from a column of its own (``<driver>@<response>``, :func:`alias`) holding the driver
at the lag in seasons the screen chose (``paired.csv`` of the screen), at lag 0. Rivals, the
break test, the model sets and the state-space refit then pair the right values; afterwards
:meth:`SeasonView.restore` gives every table back its driver ids and lags in seasons.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.evidence.grading import summary_sentence
from lagsieve.screen.seasonal import PAIRED_COLUMNS

__all__ = ["PAIRED_COLUMNS", "SeasonView", "alias", "read_paired", "resummarize", "season_view"]


def alias(driver: str, response: str) -> str:
    """The column of a driver as it is paired with one season response ('@' is in no series id)."""
    return f"{driver}@{response}"


@dataclass
class SeasonView:
    """The study's hypotheses, table, driver entries, lags and series with the aliases in place."""

    hypotheses: pd.DataFrame
    table: pd.DataFrame
    drivers: list[dict]
    lags: dict[str, list[int]]
    series: list[dict]
    back: dict[str, tuple[str, int]] = field(default_factory=dict)  # alias -> (driver, lag in seasons)

    def restore(self, df: pd.DataFrame, lag_columns: dict[str, str] | None = None) -> pd.DataFrame:
        """``df`` with driver ids and lags in seasons back: every column named in ``lag_columns``
        (lag column -> the column naming its driver) takes the alias's lag, then every alias in
        a text column becomes its driver (also inside ';'-joined lists)."""
        if not self.back or df.empty:
            return df
        out = df.copy()
        for lag_col, name_col in (lag_columns or {}).items():
            if lag_col in out and name_col in out:
                out[lag_col] = [self._lags(n, v) for n, v in zip(out[name_col], out[lag_col])]
        pattern = re.compile("|".join(re.escape(a) for a in sorted(self.back, key=len, reverse=True)))
        for col in out.columns:
            if out[col].dtype == object or pd.api.types.is_string_dtype(out[col]):
                out[col] = [pattern.sub(lambda m: self.back[m.group(0)][0], v) if isinstance(v, str) else v
                            for v in out[col]]
        return out

    def _lags(self, names, lags):
        """One lag (or a ';'-joined list of them) with the alias's lag in seasons in place."""
        if not isinstance(names, str):
            return lags
        if ";" not in names and not isinstance(lags, str):
            return self.back[names][1] if names in self.back else lags
        parts = str(lags).split(";")
        return ";".join(str(self.back[n][1]) if n in self.back else v for n, v in zip(names.split(";"), parts))


def season_view(hypotheses: pd.DataFrame, paired: pd.DataFrame, table: pd.DataFrame, drivers: list[dict],
                lags: dict[str, list[int]], series: list[dict]) -> SeasonView:
    """The aliases of every hypothesis lagged in seasons (``lag_unit`` 'season') with a chosen lag."""
    if "lag_unit" not in hypotheses or paired is None or paired.empty:
        return SeasonView(hypotheses, table, drivers, lags, series)
    hyps = hypotheses.copy()
    pick = (hyps["lag_unit"] == "season") & hyps["lag"].notna()
    config = {d["id"]: d for d in drivers}
    columns, extra, back = {}, [], {}
    for i in np.flatnonzero(pick.to_numpy()):
        rid, did, lag = hyps["response"].iat[i], hyps["driver"].iat[i], int(hyps["lag"].iat[i])
        rows = paired[(paired["response"] == rid) & (paired["driver"] == did) & (paired["lag"] == lag)]
        a = alias(did, rid)
        columns[a] = pd.Series(rows["value"].to_numpy(float), index=rows["year"].to_numpy()).reindex(table.index)
        back[a] = (did, lag)
        extra.append(dict(config[did], id=a, label=config[did].get("label", did), responses=[rid]))
    idx = hyps.index[pick]
    hyps.loc[idx, "driver"] = [alias(d, r) for d, r in zip(hyps.loc[idx, "driver"], hyps.loc[idx, "response"])]
    hyps.loc[idx, "lag"] = 0
    table = table.assign(**columns) if columns else table
    return SeasonView(hyps, table, drivers + extra, dict(lags, **dict.fromkeys(back, [0])), series + extra, back)


def read_paired(dirs) -> pd.DataFrame:
    """The screens' ``paired.csv`` (rows for season responses only) as one frame."""
    parts = [pd.read_csv(d / "paired.csv") for d in dirs if (d / "paired.csv").is_file()]
    parts = [p for p in parts if not p.empty]  # annual responses write the header alone
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=PAIRED_COLUMNS)


def resummarize(ev: pd.DataFrame, screen: dict, series: list[dict]) -> pd.DataFrame:
    """The one-line summaries of the hypotheses lagged in seasons again, with their lag in
    seasons ('2-season lead'), once :meth:`SeasonView.restore` has given it back."""
    if "lag_unit" not in ev:
        return ev
    ev = ev.copy()
    labels = {s["id"]: s.get("label") for s in series}
    pick = ev["lag_unit"] == "season"
    ev.loc[pick, "summary"] = [summary_sentence(r, screen["min_overlap"], labels.get(r["response"]))
                               for r in ev[pick].to_dict("records")]
    return ev
