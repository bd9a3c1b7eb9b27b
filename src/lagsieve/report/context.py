"""What the report is made from (:class:`Context`) and the plain words that
describe a hypothesis (why it is set aside, its one-line summary). No markup here."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.evidence.grading import insufficient_reason
from lagsieve.formats import is_missing, text
from lagsieve.evidence.vocabulary import GRADE_WORDS, SET_ASIDE
from lagsieve.prep.align import lagged_pair
from lagsieve.stats.splines import fit_pspline, partial_effect


def flag_list(v) -> list[str]:
    return [c for c in text(v).split(";") if c]


def lead_words(lag, unit: str | None = None) -> str:
    """'same year', '2-year lead'; with ``unit`` 'season' (a monthly driver of a season
    response) 'same season', '2-season lead'."""
    if is_missing(lag):
        return "no lag chosen"
    lag, unit = int(lag), unit or "year"
    return f"same {unit}" if lag == 0 else f"{lag}-{unit} lead"


def row_lead(row: dict) -> str:
    """:func:`lead_words` of a hypothesis row, in the unit of its lag (``lag_unit``)."""
    unit = row.get("lag_unit")
    return lead_words(row.get("lag"), None if is_missing(unit) else str(unit))


# ----------------------------------------------------------------------------- plain words
def _weak_reason(row: dict, flags: list[str], label=str) -> str:
    sk = row.get("oos_skill")
    if "explained-by-rival" in flags and text(row.get("rival")):
        return f"weak: {label(text(row.get('rival')))} explains the same signal"
    if "failed-retest" in flags:
        return "weak: no skill when re-tested on the latest years"
    if not is_missing(sk) and float(sk) <= 0:
        return "weak: no out-of-sample skill over the hardest baseline"
    if "lag-selected" in flags:
        return "weak: significant only at the chosen lag"
    if "sign-unexpected" in flags:
        return "weak: sign opposite to the one stated beforehand"
    return "weak: short of the moderate rule"


def not_computed_reason(row: dict, min_overlap: int = 0) -> str:
    """Why a hypothesis graded insufficient-data could not be judged: the reason its summary
    gives (written by the evidence stage, which knows the screen's min_overlap), else the
    reason worked out again from its row."""
    said = text(row.get("summary"))
    prefix = "insufficient data: "
    return said[len(prefix):] if said.startswith(prefix) else insufficient_reason(row, min_overlap)


def set_aside_reason(row: dict, label=str) -> str:
    """A few words on why a hypothesis is not carried forward; ``label`` names a series from its
    id (a rival that explains the same signal is named)."""
    g, flags = text(row.get("grade")), flag_list(row.get("flags"))
    if g in SET_ASIDE:
        return GRADE_WORDS[g]
    if g == "insufficient-data":
        return "not computed: " + not_computed_reason(row)
    if g == "none":
        words = "no support after adjustment"
        if "sign-unexpected" in flags:
            words += "; sign opposite to the one stated beforehand"
        return words
    if g == "weak":
        return _weak_reason(row, flags, label)
    return GRADE_WORDS.get(g, g)


def summary_line(row: dict) -> str:
    s = text(row.get("summary"))
    if s:
        return s
    r = row.get("r")
    direction = "" if is_missing(r) else (", positive" if float(r) > 0 else ", negative")
    return f"{row_lead(row)}{direction}: {text(row.get('grade'))}"


# ----------------------------------------------------------------------------- context
@dataclass
class Context:
    study: object
    table: pd.DataFrame
    screen: pd.DataFrame
    evidence: pd.DataFrame
    forecasts: pd.DataFrame
    nulls: pd.DataFrame
    notes: pd.DataFrame
    annual: pd.DataFrame | None
    provenance: dict
    labels: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)
    invented: bool = False
    condition: dict | None = None   # the condition stage's outputs (report.condition.read_outputs)
    rivals: dict | None = None      # conditional.csv and models.csv (report.rivals.read_outputs)
    joint: tuple | None = None      # joint.csv and joint_groups.csv (report.joint.read_joint)
    windows: pd.DataFrame | None = None  # windows.csv (report.stability.read_windows)
    made: dict = field(default_factory=dict, repr=False, compare=False)  # see :meth:`once`

    @classmethod
    def of(cls, study, table, screen, evidence, forecasts, nulls, notes, provenance,
           annual: pd.DataFrame | None = None) -> "Context":
        """The context of one study: labels and units from its series, invented from its config."""
        series = study.responses + study.drivers
        return cls(study=study, table=table, screen=screen, evidence=evidence, forecasts=forecasts, nulls=nulls,
                   notes=notes, annual=annual, provenance=provenance,
                   labels={s["id"]: s.get("label") or s["id"] for s in series},
                   units={s["id"]: s["unit"] for s in series if s.get("unit")},
                   invented=bool(study.raw.get("invented")))

    def once(self, key: str, make):
        """``make(self)``, made once for this context and kept under ``key`` (made again when
        ``evidence`` has been replaced): the page, the tables and the document read the same
        evidence rows, annex summary and methods text. What it returns is shared: read it, do
        not change it."""
        kept = self.made.get(key)
        if kept is None or kept[0] is not self.evidence:
            kept = self.made[key] = (self.evidence, make(self))
        return kept[1]

    @property
    def rows(self) -> list[dict]:
        """The evidence table's rows as dicts, in its order, made once (:meth:`once`): with its
        hundred columns one ``to_dict('records')`` cost a small study about 3 ms, and the report
        made it a dozen times."""
        return self.once("rows", lambda ctx: records(ctx.evidence))

    def label(self, sid) -> str:
        return self.labels.get(sid, str(sid))

    def axis(self, sid) -> str:
        u = self.units.get(sid)
        return f"{self.label(sid)} ({u})" if u else self.label(sid)


def records(frame: pd.DataFrame) -> list[dict]:
    """``frame.to_dict('records')`` (Python's int, float, bool and str, NaN for a missing value),
    column by column: the same dicts at about 60% of the CPU on a wide frame."""
    cols = list(frame.columns)
    return [dict(zip(cols, values)) for values in zip(*(_native(frame[c]) for c in cols))]


def _native(column: pd.Series) -> list:
    """A column's values as Python's own, as ``to_dict`` gives them: numpy scalars in an object
    column made Python's, pandas' NA of a nullable column None."""
    values = column.tolist()
    if column.dtype == object or not isinstance(column.dtype, np.dtype):
        values = [None if v is pd.NA else v.item() if isinstance(v, np.generic) else v for v in values]
    return values


def missing_last(value) -> tuple:
    """A sort key that puts missing values last, as ``DataFrame.sort_values`` does."""
    return (True, 0) if is_missing(value) else (False, value)


def ranked(rows: list[dict], rid) -> list[dict]:
    """The rows of the response ``rid`` by rank (missing ranks last, ties in table order)."""
    return sorted((r for r in rows if r["response"] == rid), key=lambda r: missing_last(r.get("rank")))


def not_computed(ctx: Context) -> list[tuple[str, list[str]]]:
    """The hypotheses that could not be judged (grade insufficient-data), grouped by the reason
    in plain words: [(reason, ['response label × driver label', ...])], in the order of the
    evidence table."""
    if not len(ctx.evidence) or "grade" not in ctx.evidence:
        return []
    min_overlap = int(ctx.study.screen.get("min_overlap", 0))
    groups: dict[str, list[str]] = {}
    for row in (r for r in ctx.rows if r["grade"] == "insufficient-data"):
        groups.setdefault(not_computed_reason(row, min_overlap), []).append(
            f"{ctx.label(row['response'])} \u00d7 {ctx.label(row['driver'])}")
    return list(groups.items())


def leading(ctx: Context, rid) -> list[dict]:
    """The hypotheses of the response ``rid`` that have a chosen lag, by rank (:func:`ranked`)."""
    return [r for r in ranked(ctx.rows, rid) if not is_missing(r.get("lag"))]


def top_rows(ctx: Context) -> list[dict]:
    """The ``report.top`` best-ranked hypotheses of each response that have a chosen lag (copies:
    the caller may change them)."""
    top_n = int(ctx.study.report.get("top", 3))
    out = []
    for rid in ctx.study.response_ids:
        out += [dict(r) for r in leading(ctx, rid)[:top_n]]
    return out


def gam_rows(ctx: Context, rid, did) -> pd.DataFrame:
    """The screen's fitted spline rows of one pair."""
    sc = ctx.screen
    if not len(sc) or "model" not in sc:
        return sc.iloc[0:0]
    g = sc[(sc["response"] == rid) & (sc["driver"] == did) & (sc["model"] == "gam")]
    if "edf" in g:
        g = g[g["edf"].notna()]
    if "status" in g:
        g = g[g["status"].astype(str).str.startswith("ok") | g["status"].isna()]
    return g


def gam_fit(ctx: Context, rid, did, lag: int):
    """Refit the penalised spline of one pair for the figures (same settings as the screen:
    GCV smoothness, default basis, optional year term); None when it cannot be fitted."""
    pair = lagged_pair(ctx.table, rid, did, lag)
    if pair.n < 8 or np.ptp(pair.x) <= 0:
        return None
    trend = pair.years.astype(float) if ctx.study.screen.get("gam_trend") else None
    try:
        fit = fit_pspline(pair.x, pair.y, trend=trend)
        grid = np.linspace(np.min(pair.x), np.max(pair.x), 80)
        pe = partial_effect(fit, grid)
    except (ValueError, np.linalg.LinAlgError):
        return None
    lo, hi = pe.band(1.96)
    return {"pair": pair, "grid": grid, "curve": pe.curve, "lo": lo, "hi": hi,
            "fit": float(fit.intercept) + pe.curve, "edf": float(fit.edf), "trend": trend is not None,
            "explained": float(fit.deviance_explained), "added": added_share(fit)}


def added_share(fit) -> float:
    """The share of the response's variation that the driver's curve explains beyond the rest of
    the model: (RSS of the model without the curve - RSS with it) / TSS. Without a year term this
    is the deviance explained (1 - RSS/TSS, Wood 2017, Generalized Additive Models, 2nd ed.,
    sec. 3.1.4 for a Gaussian model); with one, what the year alone explains is not counted."""
    tss = float(fit.tss)
    return (float(fit.rss_null) - float(fit.rss)) / tss if tss > 0 else float("nan")
