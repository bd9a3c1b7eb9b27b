"""The words of the evidence, defined once: grades, their order and rules, flags and the
thresholds behind them. The report, the README tables and the grading code all read them here.
"""
from __future__ import annotations

GRADES = ("strong", "moderate", "weak", "none", "spurious-trend", "insufficient-data")
GRADE_ORDER = {"strong": 0, "moderate": 1, "weak": 2, "spurious-trend": 3, "none": 4, "insufficient-data": 5}

GRADE_RULES = {
    "strong": "q-value <= FDR level, surrogate p of out-of-sample skill <= 0.05, skill > 0 against every "
              "baseline (climatology, persistence, trend), the sign stated beforehand, a re-test on the "
              "latest years that was possible, and neither trend-shared nor failed-retest.",
    "moderate": "surrogate p (best lag and model, paid for) <= alpha, skill > 0 against the hardest baseline "
                "with surrogate p of skill <= 0.10, the sign stated beforehand, and not trend-shared; or strong, "
                "but collinear with a driver that is also strong and forecasts the same response better.",
    "weak": "some support (autocorrelation-adjusted p <= alpha, surrogate p <= 0.10, or positive skill "
            "with surrogate p of skill <= 0.20) but short of moderate.",
    "none": "no support after adjustment.",
    "spurious-trend": "the naive correlation is significant but the evidence collapses after detrending, "
                      "against surrogates, or against the trend baseline out of sample.",
    "insufficient-data": "too few overlapping years for the screening or the out-of-sample scheme, a series "
                         "that is constant where the two overlap, or a computation that failed; the reason is in "
                         "the status column and in the list Not computed of the summary.",
}

FLAGS = {
    "trend-shared": "Naively significant, but not after detrending, against surrogates with the same "
                    "spectrum, or against the trend baseline out of sample: the two series may only share a trend.",
    "autocorrelated": "The effective sample size is less than half the number of years, so neighbouring "
                      "years carry overlapping information.",
    "lag-selected": "Significant at the chosen lag alone, but not once the choice among the lags tried is "
                    "paid for.",
    "short-overlap": "Fewer than 25 overlapping years: tests have little power and estimates are fragile.",
    "influential-year": "Dropping a single year changes r by more than 0.2 or flips its sign.",
    "unstable": "The sign of r differs between the two halves of the series, or a 15-year window shows "
                "the opposite sign with |r| >= 0.3.",
    "failed-retest": "Significant in sample, but no skill (<= 0) when re-tested on the latest years.",
    "collinear": "Correlated with another driver at |r| > 0.7 (Dormann et al. 2013): the evidence cannot "
                 "separate the two.",
    "sign-unexpected": "The estimated sign is opposite to the sign stated before the screening.",
    "failed": "The computation failed for this hypothesis; see its status.",
}

SHORT_OVERLAP_YEARS = 25  # common practice: below about 25 years, lagged screens have little power
COLLINEAR_R = 0.7  # Dormann et al. (2013, Ecography 36:27-46) rule of thumb

SUPPORTED = ("strong", "moderate")  # the grades a hypothesis is carried forward with

GRADE_WORDS = {  # one-line meaning of each grade, for the report's summary and the set-aside reasons
    "strong": "supported in sample, against surrogates and out of sample",
    "moderate": "supported, short of the strong rule",
    "weak": "some support, not enough to carry forward",
    "none": "no support after adjustment",
    "spurious-trend": "shares a trend only",
    "insufficient-data": "could not be judged",
}
