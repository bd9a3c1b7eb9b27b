"""Effects in the units a manager uses, with 95% intervals, and the largest effect the data
still allow for a hypothesis that is set aside.

For every hypothesis at its selected lag (:func:`add_effects`):

- ``slope_ci_low``/``slope_ci_high``: :func:`lagsieve.stats.correlation.slope_interval` (HAC
  standard error scaled by n/(n-2), guarded by the effective-sample-size standard error,
  Student t on n_eff - 2 degrees of freedom);
- ``r_ci_low``/``r_ci_high``: Fisher's z interval on the effective sample size
  (:func:`lagsieve.stats.correlation.fisher_interval`);
- ``effect`` and its interval: the slope times the change of the driver on the scale it was
  screened. A driver without transform: one unit of the driver ("per 1 kt of ..."). A driver
  with ``transform: log`` (natural log, ``prep.align.apply_transform``): a halving, ln(0.5).
  A driver with ``transform: log1p``: a halving from its median m, ln(1 + m/2) - ln(1 + m).
  A response with a log transform gives the change as a percentage, 100 (exp(effect) - 1)
  (of 1 + response for log1p), its interval carried through the same monotone map;
- ``effect_basis``: the driver's change in words; ``effect_unit``: the unit of ``effect``
  (the response's unit, or "%");
- ``effect_largest_allowed``: for a hypothesis not in ``SUPPORTED``, the bound of the effect
  interval farthest from zero, with its sign: effects beyond it in either direction lie outside
  the 95% interval, the equivalence reading of a confidence interval (Schuirmann 1987,
  J. Pharmacokinet. Biopharm. 15:657-680, two one-sided tests; a 95% interval is the
  conservative 2.5%-per-side version).

Words say "evidence", never "strong effect": an interval is a size, a grade is evidence.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.evidence.vocabulary import SUPPORTED
from lagsieve.formats import is_missing, number
from lagsieve.stats.correlation import fisher_interval, slope_interval

EFFECT_COLUMNS = ("slope_ci_low", "slope_ci_high", "r_ci_low", "r_ci_high", "effect", "effect_ci_low",
                  "effect_ci_high", "effect_basis", "effect_unit", "effect_largest_allowed")
LOG_TRANSFORMS = ("log", "log1p")


def driver_step(meta: dict | None, driver: str, screened: np.ndarray | None = None) -> tuple[float, str]:
    """(change of the driver on its screened scale, that change in words) for one driver.

    ``meta`` is the driver's config entry (label, unit, transform); ``screened`` its values on
    the screened (transformed) scale, used for the median of a log1p driver.
    """
    if meta is None:
        return 1.0, f"per unit of {driver} on the scale it was screened"
    label, unit = meta.get("label") or driver, meta.get("unit")
    transform = meta.get("transform") or "none"
    if transform == "log":
        return float(np.log(0.5)), f"for a halving of {label}"
    if transform == "log1p":
        vals = np.asarray(screened if screened is not None else [], float)
        vals = vals[np.isfinite(vals)]
        if not len(vals):
            return float(np.log(0.5)), f"for a halving of (1 + {label})"
        m = float(np.expm1(np.median(vals)))
        where = f"{number(m, _fmt([m]))} {unit}" if unit else number(m, _fmt([m]))
        return float(np.log1p(m / 2.0) - np.log1p(m)), f"for a halving of {label} from its median ({where})"
    if transform != "none":
        return 1.0, f"per unit of {label} on the {transform} scale"
    return 1.0, f"per 1 {unit} of {label}" if unit else f"per unit of {label}"


def response_scale(meta: dict | None, response: str) -> tuple[str, str]:
    """(transform, unit of the effect) of a response: its unit, or '%' for a log response."""
    if meta is None:
        return "none", ""
    transform = meta.get("transform") or "none"
    if transform == "log":
        return transform, "%"
    if transform == "log1p":
        return transform, f"% of (1 + {meta.get('label') or response})"
    return transform, meta.get("unit") or ""


def _on_response_scale(v: np.ndarray, transform: str) -> np.ndarray:
    return 100.0 * np.expm1(v) if transform in LOG_TRANSFORMS else v


def largest_allowed(low, high) -> np.ndarray:
    """The interval bound farthest from zero, with its sign (NaN when either is missing)."""
    low, high = np.asarray(low, float), np.asarray(high, float)
    return np.where(np.abs(high) >= np.abs(low), high, low)


def _row_effect(row: dict, series: dict, table: pd.DataFrame | None) -> dict:
    """The effect columns of one hypothesis row whose intervals are already in it."""
    did, rid = row["driver"], row["response"]
    screened = table[did].to_numpy(float) if table is not None and did in table else None
    step, basis = driver_step(series.get(did), did, screened)
    transform, unit = response_scale(series.get(rid), rid)
    ends = np.array([row["slope"], row["slope_ci_low"], row["slope_ci_high"]], float) * step
    e, lo, hi = _on_response_scale(ends, transform)
    lo, hi = min(lo, hi), max(lo, hi)  # a negative step (a halving) swaps the bounds
    allowed = np.nan if row.get("grade") in SUPPORTED else float(largest_allowed(lo, hi))
    return {"effect": e, "effect_ci_low": lo, "effect_ci_high": hi, "effect_basis": basis,
            "effect_unit": unit, "effect_largest_allowed": allowed}


def add_effects(ev: pd.DataFrame, series: list[dict] | None = None, table: pd.DataFrame | None = None) -> pd.DataFrame:
    """The evidence table with the columns of ``EFFECT_COLUMNS`` added (grades must be final).

    ``series``: the config entries of the study's drivers and responses (id, label, unit,
    transform); without them the effect is given per unit of the screened scale.
    ``table``: the annual table on the screened scale (for the median of a log1p driver).
    """
    ev = ev.copy()
    for col in ("slope", "slope_se", "r", "n", "n_eff"):
        if col not in ev:
            ev[col] = np.nan
    get = {c: ev[c].to_numpy(float) for c in ("slope", "slope_se", "r", "n", "n_eff")}
    ev["slope_ci_low"], ev["slope_ci_high"] = slope_interval(get["slope"], get["slope_se"], get["r"],
                                                             get["n"], get["n_eff"])
    ev["r_ci_low"], ev["r_ci_high"] = fisher_interval(get["r"], np.minimum(get["n_eff"], get["n"]))
    meta = {s["id"]: s for s in (series or [])}
    rows = [_row_effect(row, meta, table) for row in ev.to_dict("records")]
    for col in EFFECT_COLUMNS[4:]:
        ev[col] = [r[col] for r in rows]
    return ev


# ----------------------------------------------------------------------------- words
def _fmt(values) -> str:
    """A format with two significant digits of the largest magnitude among ``values``."""
    v = np.abs(np.asarray([x for x in values if not is_missing(x)], float))
    v = v[np.isfinite(v) & (v > 0)]
    if not len(v):
        return "{:.2f}"
    return f"{{:.{max(0, 1 - int(np.floor(np.log10(v.max()))))}f}}"


def _with_unit(text: str, unit: str) -> str:
    """A number with its unit: '0.060 per year', '12%'."""
    if not unit:
        return text
    return text + "%" if unit.startswith("%") else f"{text} {unit}"


def _pct(text: str, unit: str) -> str:
    """An interval bound: a percentage keeps its '%', other units are said once, after the effect."""
    return text + "%" if unit.startswith("%") else text


def _unit_tail(unit: str) -> str:
    """Words after a percentage (' of (1 + M)') or nothing."""
    return unit[1:] if unit.startswith("%") and len(unit) > 1 else ""


def effect_phrase(row: dict, response_unit: str = "", response_label: str | None = None) -> str:
    """The effect in plain words: 'M rises by 0.060 per year (95% CI 0.030–0.090) for a
    halving of forage biomass'; '' when the effect is missing. The unit is the row's
    ``effect_unit`` when present (it knows a log response's %), else ``response_unit``."""
    e, lo, hi = (row.get(k) for k in ("effect", "effect_ci_low", "effect_ci_high"))
    if any(is_missing(v) for v in (e, lo, hi)):
        return ""
    e, lo, hi = float(e), float(lo), float(hi)
    unit = row.get("effect_unit")
    unit = (response_unit or "") if is_missing(unit) else str(unit)
    label = response_label or str(row.get("response", "the response"))
    fmt, basis, tail = _fmt([e, lo, hi]), str(row.get("effect_basis") or ""), _unit_tail(unit)
    if lo > 0 or hi < 0:
        verb = "rises" if e > 0 else "falls"
        a, b = sorted((abs(lo), abs(hi)))
        body = f"{label} {verb} by {_with_unit(number(abs(e), fmt), unit)}{tail} " \
               f"(95% CI {number(a, fmt)}\u2013{_pct(number(b, fmt), unit)})"
    else:
        body = f"{label} changes by {_with_unit(number(e, '{:+' + fmt[2:]), unit)}{tail} " \
               f"(95% CI {number(lo, fmt)} to {_pct(number(hi, fmt), unit)})"
    return f"{body} {basis}".strip()


def allowed_phrase(row: dict, response_unit: str = "", response_label: str | None = None) -> str:
    """For a set-aside hypothesis, the largest effect the data still allow, in words:
    'effects on M larger than 0.090 per year for a halving of forage biomass are unlikely
    (95% CI -0.020 to 0.090)'; '' for a supported hypothesis or a missing effect."""
    big = row.get("effect_largest_allowed")
    lo, hi = row.get("effect_ci_low"), row.get("effect_ci_high")
    if any(is_missing(v) for v in (big, lo, hi)):
        return ""
    unit = row.get("effect_unit")
    unit = (response_unit or "") if is_missing(unit) else str(unit)
    label = response_label or str(row.get("response", "the response"))
    fmt, basis, tail = _fmt([big, lo, hi]), str(row.get("effect_basis") or ""), _unit_tail(unit)
    return (f"effects on {label} larger than {_with_unit(number(abs(float(big)), fmt), unit)}{tail} "
            f"{basis} are unlikely (95% CI {number(lo, fmt)} to {_pct(number(hi, fmt), unit)})").replace("  ", " ")


def effect_cell(row: dict) -> tuple[str, str]:
    """The effect for a table cell: ('+0.060 (0.030 to 0.090)', 'per year, for a halving of
    forage biomass'); ('', '') when missing."""
    e, lo, hi = (row.get(k) for k in ("effect", "effect_ci_low", "effect_ci_high"))
    if any(is_missing(v) for v in (e, lo, hi)):
        return "", ""
    fmt = _fmt([e, lo, hi])
    unit = "" if is_missing(row.get("effect_unit")) else str(row.get("effect_unit"))
    basis = "" if is_missing(row.get("effect_basis")) else str(row.get("effect_basis"))
    value = f"{number(e, '{:+' + fmt[2:])} ({number(lo, fmt)} to {number(hi, fmt)})"
    return value, ", ".join(w for w in (unit, basis) if w)
