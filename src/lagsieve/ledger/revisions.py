"""Restatements of earlier values as data, and the tolerance that decides when a restatement
supersedes a forecast.

Assessment outputs (natural mortality by age, say) are re-estimated every year: a new
assessment restates the whole history a little. The ledger records, per run, every earlier
value that changed (table ``revisions``: the old and new value, the change in absolute and
relative terms and, where the series carries a standard error, in units of it), and keeps a
forecast open through restatements within the tolerance of the config's
``ledger.restatement_tolerance`` (defaults in the config schema: half a standard error where
the value has one, else 2 % of the value). A forecast is superseded only when a value it was
trained on moved by more than that, and the reason names the series, the year, the size of
the change and the tolerance.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from lagsieve.io.config import fill_defaults

REVISION_COLUMNS = ["series", "year", "old_value", "new_value", "abs_change", "rel_change", "se", "se_units"]
NAMED_CELLS = 3  # a reason names this many cells beyond the tolerance, then counts the others


@dataclass(frozen=True)
class Tolerance:
    """How far a training value may be restated before a forecast made from it is superseded:
    ``se`` standard errors where the value has one, else ``relative`` (a fraction of |value|)."""

    se: float
    relative: float

    def words(self, has_se: bool) -> str:
        return f"{self.se:g} se" if has_se else f"{100 * self.relative:g}%"


def tolerance_of(raw: dict) -> Tolerance:
    """``ledger.restatement_tolerance`` of a raw config (:attr:`Study.raw`), the schema's
    defaults filled in."""
    given = dict(raw.get("ledger") or {})  # an absent section gets its keys' defaults too
    tol = fill_defaults({**raw, "ledger": given})["ledger"]["restatement_tolerance"]
    return Tolerance(se=float(tol["se"]), relative=float(tol["relative"]))


def cell_changes(old: pd.DataFrame, new: pd.DataFrame) -> pd.DataFrame:
    """The cells present in both tables whose value differs, with the size of the change.

    ``old`` and ``new`` have columns series, year, value, se (se may be missing). ``se`` of a
    change is the standard error published with the old value (the new one where the old has
    none); ``se_units`` = |change| / se; ``rel_change`` = change / |old value| (nan at 0)."""
    keep = ["series", "year", "value", "se"]
    o = old.reindex(columns=keep).rename(columns={"value": "old_value", "se": "old_se"})
    n = new.reindex(columns=keep).rename(columns={"value": "new_value", "se": "new_se"})
    m = o.merge(n, on=["series", "year"], how="inner")
    m = m[m["old_value"].astype(float) != m["new_value"].astype(float)].copy()
    m["abs_change"] = m["new_value"] - m["old_value"]
    with np.errstate(divide="ignore", invalid="ignore"):
        m["rel_change"] = np.where(m["old_value"] != 0, m["abs_change"] / m["old_value"].abs(), np.nan)
        se = m["old_se"].where(m["old_se"] > 0, m["new_se"]).where(lambda v: v > 0)
        m["se"] = se
        m["se_units"] = m["abs_change"].abs() / se
    m["year"] = m["year"].astype(int)
    return m[REVISION_COLUMNS].sort_values(["series", "year"]).reset_index(drop=True)


def beyond(changes: pd.DataFrame, tol: Tolerance) -> pd.Series:
    """Which changes exceed the tolerance (in se units where se is known, else relative; a
    change of a value 0 without se always exceeds it)."""
    has_se = changes["se_units"].notna()
    rel = changes["rel_change"].abs().fillna(np.inf)
    return (has_se & (changes["se_units"] > tol.se)) | (~has_se & (rel > tol.relative))


def change_words(c, tol: Tolerance) -> str:
    """One change in words: series, year, the change absolute, relative and in se, the tolerance."""
    has_se = not pd.isna(c.se_units)
    size = f"{c.abs_change:+.4g}"
    if not pd.isna(c.rel_change):
        size += f" ({100 * c.rel_change:+.2g}%"
        size += f", {c.se_units:.2g} se)" if has_se else ")"
    elif has_se:
        size += f" ({c.se_units:.2g} se)"
    return f"{c.series} {int(c.year)} restated by {size}, tolerance {tol.words(has_se)}"


def beyond_words(changes: pd.DataFrame, tol: Tolerance) -> str:
    """The changes beyond the tolerance in words, the largest first (at most ``NAMED_CELLS``)."""
    big = changes[beyond(changes, tol)]
    order = big["se_units"].fillna(big["rel_change"].abs() / tol.relative * tol.se).sort_values(ascending=False)
    big = big.loc[order.index]
    words = [change_words(c, tol) for c in big.head(NAMED_CELLS).itertuples()]
    if len(big) > NAMED_CELLS:
        words.append(f"and {len(big) - NAMED_CELLS} more beyond the tolerance")
    return "; ".join(words)
