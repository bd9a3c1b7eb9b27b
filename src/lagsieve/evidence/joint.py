"""The groups of a series screened jointly (config ``joint: [series, ...]``): for every driver a
hierarchical regression across the groups (:mod:`lagsieve.stats.joint`; Gelman & Hill 2007),
tested against the screen's own surrogates, the surrogate replacing the driver for every
group at once, and scored out of sample; one row per series x driver in ``joint.csv``
(``JOINT_COLUMNS``), one per series x driver x group in ``joint_groups.csv``
(``JOINT_GROUP_COLUMNS``), and the families of the false-discovery control.

Per series x driver:

* the lag: each of the driver's lags is fitted on the years every group and the driver at
  that lag are observed (at least ``min_overlap``); the lag with the largest shared-slope
  statistic (:func:`lagsieve.stats.joint.shared_t`, directed by the expected sign) is kept,
  and the surrogate p (``p_surrogate``) takes the largest over the lags of every surrogate,
  so the choice is paid for as in the screen;
* at that lag: statsmodels' MixedLM by REML (random intercept and slope by group): the shared
  slope with its 95% interval (Student t with G - 1 degrees of freedom: with G groups of a
  balanced design the shared slope's variance is estimated from G group slopes; Kenward &
  Roger 1997, Biometrics 53:983-997, give exactly this in balanced designs, from memory), the
  between-group spread, each group's shrunken slope with a 95% prediction interval (normal),
  the likelihood-ratio test of group-specific against shared slopes (``p_lrt``, boundary
  mixture; it assumes independent years and does not pay for the lag choice: 15% of invented
  worlds without any effect rejected at 5%, bench/joint.py), and the surrogate test of the
  same question (``p_heterogeneity``: :func:`lagsieve.stats.joint.heterogeneity_null` at every
  lag, each member at its own chosen lag, which keeps the errors' autocorrelation and pays for
  the choice; the words use it);
* out of sample: :func:`lagsieve.stats.joint.joint_rolling_origin` on the years every group,
  its previous year and the driver at every lag are observed, skill against each group's
  hardest baseline summed over the groups, with its surrogate p;
* the words (``JOINT_WORDS`` in :mod:`lagsieve.evidence.vocabulary`), with the groups in age
  order (:func:`age_order`).

Every fit is unweighted (``screen.weights`` weights the screen's forecasts, not this model).
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as _st

from lagsieve.evidence.grading import family_labels
from lagsieve.evidence.vocabulary import JOINT_WORDS
from lagsieve.io.config import Study
from lagsieve.prep.align import forecast_frame, shift_batch
from lagsieve.prep.checks import MIN_FORECASTS
from lagsieve.screen.hypothesis import backtest_windows, directed, driver_batch, surrogate_p
from lagsieve.stats.joint import (
    any_group_stat,
    balanced_fit,
    design,
    design_part,
    heterogeneity_null,
    joint_rolling_origin,
    mixed_fit,
    shared_t,
    slope_t,
)
from lagsieve.stats.multiplicity import family_level_q

JOINT_COLUMNS = ["series", "driver", "groups", "age_order", "expected_sign", "lag", "n_years", "first_year",
                 "last_year", "slope", "slope_se", "slope_low", "slope_high", "spread", "residual_sd",
                 "p_surrogate", "p_any", "q_value", "lrt", "p_lrt", "p_heterogeneity", "oos_skill", "oos_n",
                 "oos_p_surrogate", "words", "note"]
JOINT_GROUP_COLUMNS = ["series", "driver", "group", "response", "age_rank", "lag", "slope_own", "p_own", "slope",
                       "slope_low", "slope_high", "oos_skill"]
FAMILY_COLUMNS = ["response", "driver", "family"]


def age_order(groups: list[str], condition: dict | None = None) -> tuple[list[int], str]:
    """(positions of ``groups`` youngest first, how the order was found): by the first number in
    every group's name (``age2`` < ``age3-4`` < ``age5plus``); else by the first age of the
    condition section's age ranges when every group is one; else the order of the responses in
    the config (then list the groups youngest first)."""
    firsts = [re.search(r"\d+", g) for g in groups]
    if all(firsts):
        return sorted(range(len(groups)), key=lambda i: int(firsts[i].group())), "the number in each group's name"
    ranges = (condition or {}).get("age_groups") or {}
    if all(g in ranges for g in groups):
        return sorted(range(len(groups)), key=lambda i: ranges[groups[i]][0]), "the condition section's age ranges"
    return list(range(len(groups))), "the order of the responses in the config"


def _joint_sign(study: Study, responses: list[str], driver: str) -> str:
    """The expected sign of a driver for every group, 'any' when the groups' signs differ."""
    signs = {next(d for d in study.drivers_for(r) if d["id"] == driver).get("expected_sign", "any") for r in responses}
    return signs.pop() if len(signs) == 1 else "any"


@dataclass(frozen=True)
class LagScan:
    """The joint statistics of every batch member at every usable lag, and the lag choice."""

    lags: np.ndarray     # (L,) the usable lags
    rows: list           # per lag, the table rows used (every group and the driver observed)
    any_stat: np.ndarray     # (L, S) :func:`lagsieve.stats.joint.any_group_stat`
    shared_stat: np.ndarray  # (L, S) directed :func:`lagsieve.stats.joint.shared_t`
    group_t: np.ndarray      # (L, S, G) |t| of every group's own slope (:func:`lagsieve.stats.joint.slope_t`)
    differ: np.ndarray       # (L, S) :func:`lagsieve.stats.joint.heterogeneity_null` at every lag

    @property
    def pick(self) -> np.ndarray:
        """(S,) every member's lag index: the largest any-group statistic."""
        return np.argmax(self.any_stat, axis=0)

    def p_values(self) -> tuple[float, float, float]:
        """(p of "no group responds", p of the shared slope, p of "the slopes differ"), each at
        every member's own chosen lag, so that the choice is paid for as in the screen (a lag
        chosen where the groups respond most is also where their slopes differ most by chance:
        without this, the test of differing slopes rejected 15% of invented worlds with no
        effect at all, at 5%; bench/joint.py)."""
        cols = np.arange(self.any_stat.shape[1])
        return tuple(surrogate_p(a[self.pick, cols]) for a in (self.any_stat, self.shared_stat, self.differ))

    def group_p(self) -> np.ndarray:
        """(G,) p of every group's own slope, each member at its own chosen lag."""
        at = self.group_t[self.pick, np.arange(self.group_t.shape[1])]  # (S, G)
        return np.array([surrogate_p(at[:, g]) for g in range(at.shape[1])])


def _varies(x: np.ndarray, trend: np.ndarray) -> bool:
    """Whether the driver x (T,) varies around its own line in the year (else no slope can be fitted)."""
    rest = x - trend @ np.linalg.lstsq(trend, x, rcond=None)[0]
    return bool(np.std(rest) > 1e-9 * max(np.std(x), np.abs(x).max(), 1e-300))


def scan_lags(table: pd.DataFrame, responses: list[str], batch: np.ndarray, lags: list[int], sign: str,
              min_overlap: int) -> LagScan | None:
    """:class:`LagScan` over the lags with at least ``min_overlap`` years where every group and
    the driver at that lag are observed (None when there is no such lag)."""
    Y = table[responses].to_numpy(float).T
    used, rows, any_stat, shared, group_t, differ = [], [], [], [], [], []
    for k in lags:
        xk = shift_batch(batch, int(k))
        ok = np.flatnonzero(~np.isnan(Y).any(0) & ~np.isnan(xk[0]))
        if len(ok) < max(min_overlap, 4):
            continue
        D, trend = design(xk[:, ok], False), level_and_trend(table.index.to_numpy()[ok])
        if not _varies(D[0, :, 0], trend):
            continue
        part = design_part(D, trend)  # shared by the two fits of the batch at this lag
        fit = balanced_fit(D, Y[:, ok], trend, part)
        used.append(int(k))
        rows.append(ok)
        any_stat.append(any_group_stat(fit, sign))
        shared.append(directed(shared_t(fit), sign))
        group_t.append(np.abs(slope_t(fit)))
        differ.append(heterogeneity_null(D, Y[:, ok], trend, part))
    if not used:
        return None
    return LagScan(lags=np.asarray(used), rows=rows, any_stat=np.stack(any_stat), shared_stat=np.stack(shared),
                   group_t=np.stack(group_t), differ=np.stack(differ))


def level_and_trend(years: np.ndarray) -> np.ndarray:
    """(T, 2) the nuisance columns of every group: its own level and linear trend in the year."""
    yr = np.asarray(years, float)
    return np.column_stack([np.ones(len(yr)), yr - yr.mean()])


def _fit_entries(x: np.ndarray, Y: np.ndarray, years: np.ndarray, alpha_level: float = 0.95):
    """(row entries, per-group (own slope, shrunken slope, low, high)) of the real fit at one lag;
    x (T,) the real driver at that lag on the rows of Y (G, T)."""
    trend = level_and_trend(years)
    D = design(x, False)
    closed = balanced_fit(D, Y, trend)
    own = closed.coef[:, -1]
    fit = mixed_fit(D, Y, trend, closed)
    G = Y.shape[0]
    t = _st.t.ppf(0.5 + alpha_level / 2, G - 1)
    z = _st.norm.ppf(0.5 + alpha_level / 2)
    b, se = float(fit.shared[-1]), float(fit.shared_se[-1])
    row = {"n_years": len(years), "first_year": int(years[0]), "last_year": int(years[-1]), "slope": b,
           "slope_se": se, "slope_low": float(b - t * se), "slope_high": float(b + t * se), "spread": fit.spread,
           "residual_sd": float(np.sqrt(fit.sigma2)), "lrt": fit.lrt, "p_lrt": fit.p_lrt,
           "note": "" if fit.converged else "the mixed model's optimiser did not report convergence"}
    gb, gse = fit.group_coef[:, -1], fit.group_se[:, -1]
    return row, [(float(own[g]), float(gb[g]), float(gb[g] - z * gse[g]), float(gb[g] + z * gse[g]))
                 for g in range(G)]


def joint_forecasts(table: pd.DataFrame, responses: list[str], driver: str, batch: np.ndarray,
                    lags: list[int], validation: dict) -> tuple[dict, np.ndarray | None]:
    """(oos entries, (G,) each group's skill) of the joint model's rolling-origin forecasts on
    the years every group, its previous year and the driver at every lag are observed."""
    frames = [forecast_frame(table, r, driver, lags) for r in responses]
    rows = np.asarray(sorted(set.intersection(*(set(f.rows.tolist()) for f in frames))), int)
    initial, _ = backtest_windows(len(rows), validation)
    if len(rows) - initial < MIN_FORECASTS:
        return {"oos_n": max(0, len(rows) - initial)}, None
    Y = table[responses].to_numpy(float).T[:, rows]
    Ylag = table[responses].shift(1).to_numpy(float).T[:, rows]
    X = np.stack([shift_batch(batch, int(k))[:, rows] for k in lags], axis=1)
    jf = joint_rolling_origin(Y, Ylag, table.index.to_numpy()[rows], X, np.asarray(lags), initial)
    skill = jf.skill
    return {"oos_skill": float(skill[0]), "oos_n": len(jf.years), "oos_p_surrogate": surrogate_p(skill)}, \
        jf.group_skill[0]


def holm_carriers(p_groups: np.ndarray, alpha: float) -> list[int]:
    """The groups whose own slope is supported, by Holm's (1979, Scand. J. Stat. 6:65-70)
    step-down procedure over the G groups at ``alpha``: a word that names the groups carrying
    an effect keeps the chance of naming a wrong one at most alpha."""
    out = []
    for i, g in enumerate(np.argsort(p_groups, kind="stable")):
        if not p_groups[g] <= alpha / (len(p_groups) - i):
            break
        out.append(int(g))
    return sorted(out)


def joint_words(slope: float, p_shared: float, p_differ: float, groups: list[str], slopes: np.ndarray,
                p_groups: np.ndarray, alpha: float) -> str:
    """The words of ``JOINT_WORDS`` for one series x driver; ``groups``, ``slopes`` (shrunken)
    and ``p_groups`` (each group's own slope against the surrogates) youngest first."""
    supported = bool(p_shared <= alpha)
    differ = bool(p_differ <= alpha)
    carriers = holm_carriers(np.asarray(p_groups, float), alpha)
    if differ and len(carriers) == 1:
        return f"{groups[carriers[0]]} only"
    signs = {np.sign(slopes[g]) for g in carriers}
    if differ and len(signs) > 1:
        return "opposite between ages"
    if differ and (supported or len(carriers) >= 2):
        direction = np.sign(slope) if slope != 0 else 1.0
        trend = np.polyfit(np.arange(len(groups)), direction * np.asarray(slopes), 1)[0]
        return "stronger in older fish" if trend > 0 else "stronger in younger fish"
    if not differ and supported:
        return "acts on all ages"
    return "no joint effect"


def joint_hypothesis(table: pd.DataFrame, series: str, responses: list[str], driver: str, lags: list[int],
                     sign: str, screen: dict) -> tuple[dict, pd.DataFrame]:
    """(joint.csv row, joint_groups.csv rows) of one series x driver at the driver's ``lags``,
    its statistic directed by ``sign``; ``responses`` (ids ``series:group``) youngest first;
    ``screen`` the config's screen settings."""
    groups = [r.partition(":")[2] for r in responses]
    row = {"series": series, "driver": driver, "groups": ";".join(groups), "expected_sign": sign}
    batch = driver_batch(table, driver, int(screen["surrogates"]), screen["surrogate_method"], screen["seed"],
                         screen.get("surrogate_keep_trend", True))
    scan = scan_lags(table, responses, batch, lags, sign, int(screen["min_overlap"]))
    if scan is None:
        row["note"] = (f"no lag with min_overlap {screen['min_overlap']} years where every group is observed and the "
                       "driver varies around its own trend")
        return row, pd.DataFrame(columns=JOINT_GROUP_COLUMNS)
    lag, ok = int(scan.lags[scan.pick[0]]), scan.rows[scan.pick[0]]
    p_any, p_shared, p_differ = scan.p_values()
    row.update(lag=lag, p_any=p_any, p_surrogate=p_shared, p_heterogeneity=p_differ)
    Y = table[responses].to_numpy(float).T[:, ok]
    try:
        entries, per_group = _fit_entries(shift_batch(batch[:1], lag)[0, ok], Y, table.index.to_numpy()[ok])
    except (np.linalg.LinAlgError, ValueError) as exc:  # the tests above stand; the fit is said to have failed
        row["note"] = f"the mixed model could not be fitted ({exc})"
        return row, pd.DataFrame(columns=JOINT_GROUP_COLUMNS)
    row.update(entries)
    oos, group_skill = joint_forecasts(table, responses, driver, batch, lags, screen.get("validation", {}))
    row.update(oos)
    own, shrunk, low, high = (np.array(v) for v in zip(*per_group))
    p_group = scan.group_p()
    row["words"] = joint_words(row["slope"], row["p_surrogate"], row["p_heterogeneity"], groups, shrunk, p_group,
                               screen["alpha"])
    grp = pd.DataFrame({"series": series, "driver": driver, "group": groups, "response": responses,
                        "age_rank": np.arange(1, len(groups) + 1), "lag": lag, "slope_own": own, "p_own": p_group,
                        "slope": shrunk, "slope_low": low, "slope_high": high,
                        "oos_skill": np.nan if group_skill is None else group_skill}, columns=JOINT_GROUP_COLUMNS)
    return row, grp


def series_groups(study: Study, series: str, driver: str) -> tuple[list[str], str]:
    """(the series' group responses paired with ``driver``, youngest first; how ordered)."""
    paired = [r for r in study.joint_groups()[series] if any(d["id"] == driver for d in study.drivers_for(r))]
    order, how = age_order([r.partition(":")[2] for r in paired], study.condition)
    return [paired[i] for i in order], how


def joint_table(study: Study, table: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(joint.csv rows, joint_groups.csv rows, families) of every series of ``joint:`` and every
    driver paired with two or more of its groups; ``families`` (``FAMILY_COLUMNS``) names, for
    every group response x driver of a joint fit with a surrogate p, its false-discovery family
    (whose p is Simes' combination of its members' own p-values,
    :func:`lagsieve.evidence.grading.family_labels`)."""
    rows, groups, families = [], [], []
    for series in study.joint:
        for d in study.drivers:
            responses, how = series_groups(study, series, d["id"])
            if len(responses) < 2:
                continue
            row, grp = joint_hypothesis(table, series, responses, d["id"], study.lags_for(d),
                                        _joint_sign(study, responses, d["id"]), study.screen)
            rows.append({**row, "age_order": how})
            groups.append(grp)
            if not np.isnan(row.get("p_any", np.nan)):
                families += [{"response": r, "driver": d["id"], "family": family_name(series, d["id"])}
                             for r in responses]
    joint = pd.DataFrame(rows, columns=JOINT_COLUMNS)
    grp_df = pd.concat(groups, ignore_index=True) if groups else pd.DataFrame(columns=JOINT_GROUP_COLUMNS)
    return joint, grp_df, pd.DataFrame(families, columns=FAMILY_COLUMNS)


def family_name(series: str, driver: str) -> str:
    """The label of the false-discovery family of a series' groups and one driver."""
    return f"{series}:*~{driver}"


def joint_qvalues(joint: pd.DataFrame, ev: pd.DataFrame, families: pd.DataFrame) -> pd.DataFrame:
    """joint.csv rows with ``q_value``: the Benjamini-Hochberg q-value of each series x driver
    family (its Simes p) among all the study's families (every other hypothesis a family of
    one), the first stage of :func:`lagsieve.stats.multiplicity.family_qvalues`."""
    joint = joint.copy()
    if not len(joint) or not len(families):
        return joint
    label, fam_p = family_labels(ev, families)
    q = dict(zip(label, family_level_q(ev["p_surrogate"].to_numpy(float), label, fam_p)))
    joint["q_value"] = [q.get(family_name(s, d), np.nan) for s, d in zip(joint["series"], joint["driver"])]
    return joint
