"""The words of the evidence, defined once: grades, their order and rules, flags and the
thresholds behind them. The report, the README tables and the grading code all read them here.
"""
from __future__ import annotations

GRADES = ("strong", "moderate", "weak", "no-forecast-skill", "autocorrelation-only", "trend-confounded",
          "spurious-trend", "none", "insufficient-data")
GRADE_ORDER = {g: i for i, g in enumerate(GRADES)}  # the order of ranks within a response

#: The grades that set a hypothesis aside for one named reason, each with its flag (one reason, one word).
SET_ASIDE = ("no-forecast-skill", "autocorrelation-only", "trend-confounded", "spurious-trend")

GRADE_RULES = {
    "strong": "q-value <= FDR level, surrogate p of out-of-sample skill <= 0.05, skill > 0 against every "
              "baseline (climatology, persistence, trend, trend with AR(1) errors), the sign stated "
              "beforehand, a re-test on the latest years that was possible, and neither trend-shared nor "
              "failed-retest; and support kept given the strongest rival (below).",
    "moderate": "surrogate p (best lag and model, paid for) <= alpha, skill > 0 against the hardest baseline "
                "with surrogate p of skill <= 0.10, the sign stated beforehand, and not trend-shared; or strong, "
                "but collinear with a driver that is also strong and forecasts the same response better. Strong "
                "and moderate also require support kept given the strongest rival (the other driver of the "
                "response graded weak or better or no-forecast-skill given which this one adds least forecast "
                "skill): added skill > 0 with surrogate p <= 0.10 and Clark-West p <= 0.10, and partial "
                "correlation of the sign and at the lag found alone with surrogate p <= alpha, against residual "
                "surrogates; a "
                "driver that loses it given a rival that keeps its own support given this "
                "driver (or that neither survives, with the larger |r| alone) is weak and flagged "
                "explained-by-rival.",
    "weak": "some support (autocorrelation-adjusted p <= alpha, surrogate p <= 0.10, or positive skill "
            "with surrogate p of skill <= 0.20) but short of moderate, and none of the reasons below.",
    "no-forecast-skill": "in-sample evidence survives surrogates (surrogate p <= alpha), but out-of-sample "
                         "skill does not (skill <= 0 against the hardest baseline, or surrogate p of skill "
                         "> 0.10).",
    "autocorrelation-only": "the naive correlation is significant, but not against surrogates with the same "
                            "spectrum (surrogate p > alpha), and it is not a shared trend.",
    "trend-confounded": "as spurious-trend, but the driver is little more than its own straight line "
                        "(r^2 with the year >= 0.8): no screen can tell its effect apart from any trend "
                        "shared with the response.",
    "spurious-trend": "the naive correlation is significant; both series carry a significant trend; neither the "
                      "detrended nor the differenced correlation is significant; and a trend baseline forecasts "
                      "as well as the candidate out of sample.",
    "none": "no support after adjustment.",
    "insufficient-data": "too few overlapping years for the screening or the out-of-sample scheme, a series "
                         "that is constant where the two overlap, or a computation that failed; the reason is in "
                         "the status column and in the list Not computed of the summary.",
}

FLAGS = {
    "trend-shared": "Naively significant; both series trend; neither the detrended nor the differenced "
                    "correlation is significant; and a trend baseline forecasts as well as the candidate: the "
                    "two series may only share a trend.",
    "driver-trend": "A straight line in the year explains at least 80% of the variance of the driver over the "
                    "screened years: its effect cannot be told apart from any other trend.",
    "autocorrelation-only": "Naively significant, but not against surrogates with the same spectrum: "
                            "autocorrelation alone makes correlations this large common.",
    "no-forecast-skill": "Supported in sample against surrogates, but no out-of-sample skill over the hardest "
                         "baseline (skill <= 0, or not better than the skill of the surrogates, p > 0.10).",
    "autocorrelated": "The effective sample size is less than half the number of years, so neighbouring "
                      "years carry overlapping information.",
    "lag-selected": "Significant at the chosen lag alone, but not once the choice among the lags tried is "
                    "paid for.",
    "short-overlap": "Fewer than 25 overlapping years: tests have little power and estimates are fragile.",
    "influential-year": "Dropping a single year changes r by more than 0.2 or flips its sign.",
    "unstable": "The slope at the chosen lag changes at some year: the sup-F test of a change in slope at "
                "an unknown year (Andrews 1993; the intercept free to change too) has surrogate p <= alpha "
                "(tested for grades weak and above and no-forecast-skill, with 20 or more overlapping years).",
    "failed-retest": "Significant in sample, but no skill (<= 0) when re-tested on the latest years.",
    "collinear": "Correlated with another driver at |r| > 0.7 (Dormann et al. 2013): the evidence cannot "
                 "separate the two.",
    "sign-unexpected": "The estimated sign is opposite to the sign stated before the screening.",
    "explained-by-rival": "Another driver of the same response explains the same signal: given that rival "
                          "(named in the rival column) this driver no longer adds forecast skill that its "
                          "residual surrogates rarely reach, or its partial correlation does not survive them; "
                          "a strong or moderate driver is capped at weak, a weak or no-forecast-skill one keeps "
                          "its grade and names the rival that is still strong or moderate.",
    "failed": "The computation failed for this hypothesis; see its status.",
}

SHORT_OVERLAP_YEARS = 25  # common practice: below about 25 years, lagged screens have little power
COLLINEAR_R = 0.7  # Dormann et al. (2013, Ecography 36:27-46) rule of thumb

DRIVER_TREND_R2 = 0.8  # common practice, no published source: a driver 80% straight line is "a trend"

SUPPORTED = ("strong", "moderate")  # the grades a hypothesis is carried forward with

GRADE_WORDS = {  # one-line meaning of each grade, for the report's summary and the set-aside reasons
    "strong": "supported in sample, against surrogates and out of sample",
    "moderate": "supported, short of the strong rule",
    "weak": "some support, not enough to carry forward",
    "no-forecast-skill": "real in sample, but no forecast skill on years not used to fit",
    "autocorrelation-only": "no stronger than autocorrelated series with no link (surrogates)",
    "trend-confounded": "the driver is mostly its own trend: cannot be told apart from a shared trend",
    "spurious-trend": "a shared trend only: nothing left after detrending or differencing, and a trend "
                      "forecasts as well",
    "none": "no support after adjustment",
    "insufficient-data": "could not be judged",
}

#: The words of a joint screen of the groups of one series (:mod:`lagsieve.evidence.joint`),
#: each with its rule; ``{group}`` is the one group that carries the effect. The rules are
#: lagsieve's own (no published source), applied in this order, the first that holds wins.
JOINT_WORDS = {
    "{group} only": "the slopes differ between the groups (heterogeneity p <= alpha) and exactly one group's "
                    "own slope is supported (its surrogate p, by Holm's step-down over the groups at alpha)",
    "opposite between ages": "the slopes differ and two supported groups' slopes have opposite signs",
    "stronger in older fish": "the slopes differ, and the shared slope is supported (surrogate p <= alpha) "
                              "or two or more groups' own slopes are; the shrunken slope in the shared "
                              "direction grows from the youngest group to the oldest (least-squares trend "
                              "on age rank)",
    "stronger in younger fish": "as above, the slope in the shared direction falling with age",
    "acts on all ages": "the slopes do not differ (heterogeneity p > alpha) and the shared slope is supported "
                        "(surrogate p <= alpha)",
    "no joint effect": "none of the above",
}
