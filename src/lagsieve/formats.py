"""Numbers and ranges as people read them: the one place where lagsieve formats values for
messages, the report, the ledger and the command line (the bottom layer: it imports nothing
of lagsieve). Hashing uses its own canonical text (``ledger.fingerprint.value_text``), which
is not for reading.
"""
from __future__ import annotations

import pandas as pd


def is_missing(v) -> bool:
    """None, NaN, NaT or pandas' NA; a value of another kind (text) is not missing."""
    if v is None:
        return True
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def number(v, fmt: str = "{:.3f}") -> str:
    """A number as text with ``fmt``; empty when missing, the value as given when not a number."""
    if is_missing(v):
        return ""
    try:
        return fmt.format(float(v))
    except (TypeError, ValueError):
        return str(v)


def short_number(x: float) -> str:
    """A number as messages and notes write it: six significant digits."""
    return f"{x:.6g}"


def p_text(v) -> str:
    """A p- or q-value for reading: three decimals, '< 0.001' below that; empty when missing."""
    if is_missing(v):
        return ""
    v = float(v)
    return "< 0.001" if v < 0.001 else f"{v:.3f}"


def text(v) -> str:
    """A cell as text; empty when missing."""
    return "" if is_missing(v) else str(v)


def year_spans(years) -> str:
    """Years as runs: 1990, 1991, 1992, 1995 -> '1990-1992, 1995'."""
    ys = sorted(int(y) for y in years)
    out, i = [], 0
    while i < len(ys):
        j = i
        while j + 1 < len(ys) and ys[j + 1] == ys[j] + 1:
            j += 1
        out.append(str(ys[i]) if i == j else f"{ys[i]}-{ys[j]}")
        i = j + 1
    return ", ".join(out)


def lag_range(lags) -> str:
    """Lags tried: 0, 1, 2, 3 -> '0–3' (an unbroken run of three or more); 0, 2 -> '0, 2'."""
    lags = sorted(int(v) for v in lags)
    if len(lags) > 2 and lags == list(range(lags[0], lags[-1] + 1)):
        return f"{lags[0]}\u2013{lags[-1]}"
    return ", ".join(map(str, lags))


def skill_percent(skill: float) -> str:
    """A positive forecast skill (1 - MSE ratio) as the percentage by which the squared error is
    lower: '69%'; below 0.5%, 'less than 1%' (never '0%' for a skill above 0)."""
    return f"{100 * skill:.0f}%" if skill >= 0.005 else "less than 1%"
