"""The methods text of a run: the facts it states (:func:`methods_facts`, plain data; series
by their labels, the grade rules in full), the
paragraphs rendered from ``templates/methods.txt`` and the references they cite."""
from __future__ import annotations

import pandas as pd

from lagsieve.evidence.vocabulary import GRADE_RULES
from lagsieve.io.config import YEAR_CONTROL
from lagsieve.report.context import Context
from lagsieve.report.render import render_text

REF = {
    "lecren": "Le Cren, E.D. (1951) The length-weight relationship and seasonal cycle in gonad weight and "
              "condition in the perch (Perca fluviatilis). J. Anim. Ecol. 20:201-219.",
    "huber": "Huber, P.J. (1964) Robust estimation of a location parameter. Ann. Math. Statist. 35:73-101.",
    "froese": "Froese, R. (2006) Cube law, condition factor and weight-length relationships: history, "
              "meta-analysis and recommendations. J. Appl. Ichthyol. 22:241-253.",
    "kish": "Kish, L. (1965) Survey Sampling. Wiley, New York.",
    "raowu": "Rao, J.N.K. & Wu, C.F.J. (1988) Resampling inference with complex survey data. "
             "J. Amer. Statist. Assoc. 83:231-241.",
    "pyper": "Pyper, B.J. & Peterman, R.M. (1998) Comparison of methods to account for autocorrelation in "
             "correlation analyses of fish data. Can. J. Fish. Aquat. Sci. 55:2127-2140.",
    "granger": "Granger, C.W.J. & Newbold, P. (1974) Spurious regressions in econometrics. "
               "J. Econometrics 2:111-120.",
    "santer": "Santer, B.D., Wigley, T.M.L., Boyle, J.S., Gaffen, D.J., Hnilo, J.J., Nychka, D., Parker, D.E. & "
              "Taylor, K.E. (2000) Statistical significance of trends and trend differences in layer-average "
              "atmospheric temperature time series. J. Geophys. Res. 105:7337-7356.",
    "newey": "Newey, W.K. & West, K.D. (1987) A simple, positive semi-definite, heteroskedasticity and "
             "autocorrelation consistent covariance matrix. Econometrica 55:703-708.",
    "ebisuzaki": "Ebisuzaki, W. (1997) A method to estimate the statistical significance of a correlation "
                 "when the data are serially correlated. J. Climate 10:2147-2153.",
    "theiler": "Theiler, J., Eubank, S., Longtin, A., Galdrikian, B. & Farmer, J.D. (1992) Testing for "
               "nonlinearity in time series: the method of surrogate data. Physica D 58:77-94.",
    "buhlmann": "B\u00fchlmann, P. (1997) Sieve bootstrap for time series. Bernoulli 3:123-148.",
    "tashman": "Tashman, L.J. (2000) Out-of-sample tests of forecasting accuracy: an analysis and review. "
               "Int. J. Forecasting 16:437-450.",
    "bergmeir": "Bergmeir, C., Hyndman, R.J. & Koo, B. (2018) A note on the validity of cross-validation for "
                "evaluating autoregressive time series prediction. Comput. Stat. Data Anal. 120:70-83.",
    "dm": "Diebold, F.X. & Mariano, R.S. (1995) Comparing predictive accuracy. J. Bus. Econ. Stat. 13:253-263.",
    "hln": "Harvey, D., Leybourne, S. & Newbold, P. (1997) Testing the equality of prediction mean squared "
           "errors. Int. J. Forecasting 13:281-291.",
    "bh": "Benjamini, Y. & Hochberg, Y. (1995) Controlling the false discovery rate: a practical and powerful "
          "approach to multiple testing. J. R. Stat. Soc. B 57:289-300.",
    "dormann": "Dormann, C.F. et al. (2013) Collinearity: a review of methods to deal with it and a simulation "
               "study evaluating their performance. Ecography 36:27-46.",
    "eilers": "Eilers, P.H.C. & Marx, B.D. (1996) Flexible smoothing with B-splines and penalties. "
              "Statistical Science 11:89-121.",
    "craven": "Craven, P. & Wahba, G. (1979) Smoothing noisy data with spline functions. "
              "Numerische Mathematik 31:377-403.",
    "kimgu": "Kim, Y.-J. & Gu, C. (2004) Smoothing spline Gaussian regression: more scalable computation via "
             "efficient approximation. J. R. Stat. Soc. B 66:337-356.",
    "westfall": "Westfall, P.H. & Young, S.S. (1993) Resampling-Based Multiple Testing: Examples and Methods "
                "for p-Value Adjustment. Wiley, New York.",
    "clarkwest": "Clark, T.E. & West, K.D. (2007) Approximately normal tests for equal predictive accuracy in "
                 "nested models. J. Econometrics 138:291-311.",
    "schuirmann": "Schuirmann, D.J. (1987) A comparison of the two one-sided tests procedure and the power "
                  "approach for assessing the equivalence of average bioavailability. "
                  "J. Pharmacokinet. Biopharm. 15:657-680.",
    "fisher": "Fisher, R.A. (1921) On the \"probable error\" of a coefficient of correlation deduced from a "
              "small sample. Metron 1:3-32.",
    "freedman": "Freedman, D. & Lane, D. (1983) A nonstochastic interpretation of reported significance levels. "
                "J. Bus. Econ. Stat. 1:292-298.",
    "anderson": "Anderson, M.J. & Legendre, P. (1999) An empirical comparison of permutation methods for tests of "
                "partial regression coefficients in a linear model. J. Stat. Comput. Simul. 62:271-303.",
    "beach": "Beach, C.M. & MacKinnon, J.G. (1978) A maximum likelihood procedure for regression with "
             "autocorrelated errors. Econometrica 46:51-58.",
    "hurvich": "Hurvich, C.M. & Tsai, C.-L. (1989) Regression and time series model selection in small samples. "
               "Biometrika 76:297-307.",
    "burnham": "Burnham, K.P. & Anderson, D.R. (2002) Model Selection and Multimodel Inference, 2nd ed. "
               "Springer, New York.",
    "borcard": "Borcard, D., Legendre, P. & Drapeau, P. (1992) Partialling out the spatial component of ecological "
               "variation. Ecology 73:1045-1055.",
    "peresneto": "Peres-Neto, P.R., Legendre, P., Dray, S. & Borcard, D. (2006) Variation partitioning of species "
                 "data matrices: estimation and comparison of fractions. Ecology 87:2614-2625.",
    "bartlett": "Bartlett, M.S. (1946) On the theoretical specification and sampling properties of "
                "autocorrelated time-series. J. R. Stat. Soc. Suppl. 8:27-41.",
    "gneiting": "Gneiting, T. & Raftery, A.E. (2007) Strictly proper scoring rules, prediction, and "
                "estimation. J. Am. Stat. Assoc. 102:359-378.",
    "dersimonian": "DerSimonian, R. & Laird, N. (1986) Meta-analysis in clinical trials. Control. Clin. Trials "
                   "7:177-188.",
    "durbin": "Durbin, J. & Koopman, S.J. (2012) Time Series Analysis by State Space Methods, 2nd ed. "
              "Oxford University Press, Oxford.",
    "seabold": "Seabold, S. & Perktold, J. (2010) Statsmodels: econometric and statistical modeling with Python. "
               "Proceedings of the 9th Python in Science Conference, 92-96.",
    "andrews": "Andrews, D.W.K. (1993) Tests for parameter instability and structural change with unknown "
               "change point. Econometrica 61:821-856.",
    "schreiber": "Schreiber, T. & Schmitz, A. (1996) Improved surrogate data for nonlinearity tests. Phys. Rev. "
                 "Lett. 77:635-638.",
    "berger": "Berger, R.L. (1982) Multiparameter hypothesis testing and acceptance sampling. Technometrics "
              "24:295-300.",
    "bai": "Bai, J. (1997) Estimation of a change point in multiple regression models. Rev. Econ. Stat. "
           "79:551-563.",
    "litzow": "Litzow, M.A. et al. (2018) Proc. R. Soc. B 285 (moving-window correlations of non-stationary "
              "environment-biology relationships; cited from memory).",
    "rubin": "Rubin, D.B. (1987) Multiple Imputation for Nonresponse in Surveys. Wiley, New York.",
    "mohn": "Mohn, R. (1999) The retrospective problem in sequential population analysis. "
            "ICES J. Mar. Sci. 56:473-488.",
    "gelman": "Gelman, A. & Hill, J. (2007) Data Analysis Using Regression and Multilevel/Hierarchical "
              "Models. Cambridge University Press, Cambridge.",
    "harville": "Harville, D.A. (1977) Maximum likelihood approaches to variance component estimation and to "
                "related problems. J. Am. Stat. Assoc. 72:320-338.",
    "bates": "Bates, D., M\u00e4chler, M., Bolker, B. & Walker, S. (2015) Fitting linear mixed-effects models using "
             "lme4. J. Stat. Softw. 67(1):1-48.",
    "selflang": "Self, S.G. & Liang, K.-Y. (1987) Asymptotic properties of maximum likelihood estimators and "
                "likelihood ratio tests under nonstandard conditions. J. Am. Stat. Assoc. 82:605-610.",
    "holm": "Holm, S. (1979) A simple sequentially rejective multiple test procedure. Scand. J. Stat. 6:65-70.",
    "efronmorris": "Efron, B. & Morris, C. (1975) Data analysis using Stein's estimator and its generalizations. "
                   "J. Am. Stat. Assoc. 70:311-319.",
    "bogomolov": "Benjamini, Y. & Bogomolov, M. (2014) Selective inference on multiple families of hypotheses. "
                 "J. R. Stat. Soc. B 76:297-318.",
    "simes": "Simes, R.J. (1986) An improved Bonferroni procedure for multiple tests of significance. "
             "Biometrika 73:751-754.",
    "wood": "Wood, S.N. (2017) Generalized Additive Models: An Introduction with R, 2nd ed. "
            "Chapman & Hall/CRC, Boca Raton.",
}


def _series_facts(ctx: Context) -> dict:
    st = ctx.study
    series = st.responses + st.drivers
    transforms: dict[str, list[str]] = {}
    for s in series:
        t = s.get("transform", "none")
        if t != "none":
            transforms.setdefault(t, []).append(ctx.label(s["id"]))
    return {"n_responses": len(st.responses), "n_drivers": len(st.drivers),
            "first_year": int(ctx.table.index.min()), "last_year": int(ctx.table.index.max()),
            "transforms": transforms,
            "aggregates": [{"label": ctx.label(s["id"]), "how": s["aggregate"].get("how", "mean"),
                            "months": s["aggregate"]["months"]} for s in series if s.get("aggregate")],
            "filled": [ctx.label(s["id"]) for s in series if s.get("fill") == "linear"],
            "own_lags": [{"label": ctx.label(d["id"]), "lags": d["lags"]} for d in st.drivers if d.get("lags")]}


def _validation_facts(ctx: Context) -> dict:
    sc, ev = ctx.study.screen, ctx.evidence
    val = sc.get("validation", {}) or {}
    init = val.get("initial_years")
    median_initial = (int(ev["oos_initial"].median())
                      if init is None and "oos_initial" in ev and ev["oos_initial"].notna().any() else None)
    ry = ev["retest_years"].dropna().astype(str) if "retest_years" in ev else pd.Series(dtype=str)
    return {"initial_years": init, "median_initial": median_initial, "holdout_years": val.get("holdout_years"),
            "retest_mode": ry.mode().iloc[0] if len(ry) else None}


def methods_facts(ctx: Context) -> dict:
    """Everything the methods text states about this run, as plain data."""
    sc = ctx.study.screen
    gam_present = bool(len(ctx.screen) and "model" in ctx.screen and (ctx.screen["model"] == "gam").any())
    return {**_series_facts(ctx), **_validation_facts(ctx),
            "lags": sc["lags"], "min_overlap": sc["min_overlap"], "gam": "gam" in sc.get("models", []),
            "gam_trend": bool(sc.get("gam_trend")), "gam_present": gam_present,
            "surrogate_method": sc.get("surrogate_method", "phase"), "surrogates": int(sc["surrogates"]),
            "keep_trend": bool(sc.get("surrogate_keep_trend", True)), "n_hypotheses": len(ctx.evidence),
            "fdr": sc["fdr"], "alpha": sc["alpha"], "inverse_variance": sc.get("weights") == "inverse-variance",
            "seed": sc["seed"], "condition": _condition_facts(ctx), "grade_rules": list(GRADE_RULES.items()),
            "rivals": ctx.rivals is not None, "controls": _control_facts(ctx), "breaks": _break_facts(ctx), "state_space": _state_space_facts(ctx), "joint": _joint_facts(ctx),
            "seasons": _season_facts(ctx), **_estimate_facts(ctx)}


def _season_facts(ctx: Context) -> dict | None:
    """What the methods text says of the seasonal screen (``by_season``); None without it."""
    parts = [r for r in ctx.study.responses if r.get("season_of")]
    if not parts:
        return None
    ev = ctx.evidence
    n = int(ev["season"].notna().sum()) if "season" in ev else 0
    return {"responses": [ctx.label(r) for r in dict.fromkeys(p["season_of"] for p in parts)],
            "seasons": [{"name": name, "months": list(months)} for name, months in ctx.study.seasons.items()],
            "lags": list(ctx.study.screen["season_lags"]), "n": n}


def _control_facts(ctx: Context) -> list[str]:
    """The study's controls in words: label (or 'a linear trend in year'), lag, responses."""
    out = []
    for c in ctx.study.controls:
        name = "a linear trend in year" if c["id"] == YEAR_CONTROL else c.get("label") or ctx.label(c["id"])
        lag = f" at lag {c['lag']}" if c["id"] != YEAR_CONTROL else ""
        where = f" (for {', '.join(ctx.label(r) for r in c['responses'])})" if c.get("responses") else ""
        out.append(f"{name}{lag}{where}")
    return out


def _estimate_facts(ctx: Context) -> dict:
    """What the methods text says of draws and vintages (``draws``, ``vintages``: None without them)."""
    ev, sc = ctx.evidence, ctx.study.screen
    out = {"draws": None, "vintages": None}
    if "draw_n" in ev and ev["draw_n"].notna().any():
        judged = ev[ev["draw_n"].notna()]
        out["draws"] = {"n": int(judged["draw_n"].max()),
                        "responses": [ctx.label(r) for r in judged["response"].unique()],
                        "fragile": int((judged["draw_fragile"].astype(str).str.lower() == "true").sum())}
    if "rt_mode" in ev and ev["rt_mode"].notna().any():
        out["vintages"] = {"responses": [ctx.label(r) for r in ev.loc[ev["rt_mode"].notna(), "response"].unique()],
                           "real_time": bool(sc.get("real_time"))}
    return out


def _joint_facts(ctx: Context) -> dict | None:
    """What the methods text says of the groups screened jointly (None without a joint screen)."""
    data = getattr(ctx, "joint", None)
    if data is None:
        return None
    joint = data[0]
    fitted = joint[joint["lag"].notna()]
    return {"series": sorted(map(str, joint["series"].unique())), "fitted": len(fitted),
            "effects": int((fitted["words"] != "no joint effect").sum())}


def _state_space_facts(ctx: Context) -> dict | None:
    """What the methods text says of the state-space refits (None when the run made none)."""
    ev = ctx.evidence
    if "ss_status" not in ev:
        return None
    status = ev["ss_status"].astype(object).fillna("").astype(str)
    skipped = ev.loc[status.str.startswith("skipped: the response has no se"), "response"]
    fitted = int(status.str.startswith("ok").sum())
    if not fitted and not len(skipped):
        return None
    return {"fitted": fitted, "no_se": [ctx.label(r) for r in dict.fromkeys(skipped)]}


def _break_facts(ctx: Context) -> dict | None:
    """What the methods text says of the break test (None when no hypothesis was tested)."""
    ev = ctx.evidence
    if "break_p" not in ev or not ev["break_p"].notna().any():
        return None
    flagged = int((ev["break_p"] <= ctx.study.screen["alpha"]).sum())
    return {"tested": int(ev["break_p"].notna().sum()), "flagged": flagged}


def _condition_facts(ctx: Context) -> dict | None:
    """What the methods text says of the condition stage (None without one)."""
    out = ctx.condition
    if out is None:
        return None
    st, ref = out["settings"], out["reference"]
    return {"years": ref["years"], "n_fish": int(ref["n_fish"]), "b": float(ref["b"]),
            "groups": list(st["age_groups"]), "seasons": list(st["seasons"]), "threshold": st["threshold"],
            "thresholds": st["thresholds"], "bootstrap": st["bootstrap"]}


def cited(facts: dict) -> list[str]:
    """Keys of the references the methods text cites, in the order it cites them."""
    refs = ["pyper", "granger", "santer", "newey", "fisher", "schuirmann"]
    if facts["gam"]:
        refs += ["eilers", "craven", "kimgu", "wood", "westfall"]
    refs += ["ebisuzaki", "theiler"] if facts["surrogate_method"] == "phase" else ["buhlmann"]
    refs += ["tashman", "bergmeir", "clarkwest", "dm", "hln", "bh", "dormann"]
    if facts.get("rivals"):
        refs += ["freedman", "anderson", "clarkwest", "beach", "hurvich", "burnham", "borcard",
                 "peresneto"]
    if facts.get("breaks"):
        refs += ["andrews", "berger", "schreiber"] + ([] if "freedman" in refs else ["freedman"]) + ["bai", "litzow"]
    refs += ["durbin", "seabold"] if facts.get("state_space") else []
    refs += ["gelman", "harville", "bates", "selflang", "holm", "efronmorris", "bogomolov", "simes"] if facts.get("joint") else []
    refs += ["rubin"] if facts.get("draws") else []
    refs += ["mohn"] if facts.get("vintages") else []
    refs += (["lecren", "huber", "froese", "kish", "raowu"] if facts.get("condition") else [])
    refs += ["dersimonian"] if facts.get("inverse_variance") else []
    return refs + ["bartlett", "gneiting"]  # the forecast ledger's paragraph


def methods_paragraphs(ctx: Context) -> tuple[list[str], list[str]]:
    """The methods text of this run (plain text paragraphs) and the reference keys it cites."""
    facts = methods_facts(ctx)
    text = render_text("methods.txt", f=facts)
    return [p.strip() for p in text.split("\n\n") if p.strip()], cited(facts)


def reference_list(keys: list[str]) -> list[str]:
    """The cited references, each once, sorted."""
    return sorted(REF[k] for k in dict.fromkeys(keys))
