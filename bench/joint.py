"""Groups screened jointly (config ``joint``; lagsieve.evidence.joint): how often each word is
said on invented worlds with a known truth, the size of its tests, and what one series x
driver costs.

Invented worlds (nothing real): a driver x, AR(1) with phi 0.5, acting at lag 1 on three age
groups (age2, age3-4, age5plus) of a series over ``--years`` years, each group
0.3 + 0.002 (t - t0) + b_g x(t - 1) + 0.5 e_g(t), e_g AR(1) with phi 0.4 (unit innovations).
Truths (b_g): ``shared`` (0.35, 0.35, 0.35), ``one`` (0.5, 0, 0), ``older`` (0.1, 0.3, 0.6),
``none`` (0, 0, 0). Each world is screened jointly at lags 0-2 with ``--surrogates``
surrogates and the expected sign 'any'.

Per truth: the share of each word; P(p_any <= 0.05) (the joint test: its size on ``none``);
P(p_heterogeneity <= 0.05) and P(p_lrt <= 0.05) (slopes differ: their size on ``shared`` and
``none``); the coverage of the shared slope's 95% interval where the slopes are equal. Then the
cost of one series x driver with 999 surrogates and 4 lags: the median wall time of
``joint_hypothesis`` over ``--timing-runs`` runs, and of its one MixedLM fit alone. Prints the
tables and writes them to ``--out`` (default ``bench/out/``, not tracked). Not a test.

    python bench/joint.py [--reps 100] [--surrogates 199] [--years 40] [--timing-runs 5] [--out bench/out]
"""
from __future__ import annotations

import argparse
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import lfilter
from threadpoolctl import threadpool_limits

from lagsieve.evidence.joint import joint_hypothesis, level_and_trend
from lagsieve.io.config import screen_defaults
from lagsieve.stats.joint import design, mixed_fit

GROUPS = ["m:age2", "m:age3-4", "m:age5plus"]
TRUTHS = {"shared": (0.35, 0.35, 0.35), "one": (0.5, 0.0, 0.0), "older": (0.1, 0.3, 0.6), "none": (0.0, 0.0, 0.0)}
EXPECTED = {"shared": "acts on all ages", "one": "age2 only", "older": "stronger in older fish",
            "none": "no joint effect"}


def autoregressive(rng, n: int, phi: float, burn: int = 100) -> np.ndarray:
    """A stationary AR(1) path of length n with unit innovations (after a burn-in)."""
    return lfilter([1.0], [1.0, -phi], rng.normal(size=n + burn))[burn:]


def invented_world(rng, slopes, years: int) -> pd.DataFrame:
    """The annual table of one invented world (driver 'drv' and the three groups of 'm')."""
    x = autoregressive(rng, years + 1, 0.5)
    index = np.arange(2000 - years, 2000)
    cols = {"drv": x[1:]}
    for g, b in zip(GROUPS, slopes):
        cols[g] = 0.3 + 0.002 * (index - index[0]) + b * x[:-1] + 0.5 * autoregressive(rng, years, 0.4)
    return pd.DataFrame(cols, index=index)


def rates(reps: int, surrogates: int, years: int, seed: int) -> pd.DataFrame:
    """One row per truth: the share of every word and the tests' rejection rates."""
    screen = dict(screen_defaults(), surrogates=surrogates)
    out = []
    for truth, slopes in TRUTHS.items():
        rng = np.random.default_rng([seed, list(TRUTHS).index(truth)])
        rows = [joint_hypothesis(invented_world(rng, slopes, years), "m", GROUPS, "drv", [0, 1, 2], "any",
                                 screen)[0] for _ in range(reps)]
        df = pd.DataFrame(rows)
        words = df["words"].value_counts(normalize=True)
        cover = ((df["slope_low"] <= slopes[0]) & (df["slope_high"] >= slopes[0])).mean() \
            if len(set(slopes)) == 1 else np.nan
        out.append({"truth": truth, "reps": reps, "expected_word": EXPECTED[truth],
                    "share_expected": float(words.get(EXPECTED[truth], 0.0)),
                    "p_any_le_05": float((df["p_any"] <= 0.05).mean()),
                    "p_heterogeneity_le_05": float((df["p_heterogeneity"] <= 0.05).mean()),
                    "p_lrt_le_05": float((df["p_lrt"] <= 0.05).mean()), "shared_coverage": cover,
                    "lag1_share": float((df["lag"] == 1).mean()),
                    "words": "; ".join(f"{w} {v:.2f}" for w, v in words.items())})
    return pd.DataFrame(out)


def timing(runs: int, years: int, seed: int) -> pd.DataFrame:
    """Median wall seconds of one series x driver (999 surrogates, lags 0-3) and of its MixedLM fit."""
    screen = dict(screen_defaults(), surrogates=999)
    table = invented_world(np.random.default_rng(seed), TRUTHS["older"], years)
    whole, fit = [], []
    for _ in range(runs):
        t0 = time.perf_counter()
        joint_hypothesis(table, "m", GROUPS, "drv", [0, 1, 2, 3], "any", screen)
        whole.append(time.perf_counter() - t0)
        x, Y = table["drv"].shift(1).to_numpy()[1:], table[GROUPS].to_numpy().T[:, 1:]
        t0 = time.perf_counter()
        mixed_fit(design(x, False), Y, level_and_trend(table.index.to_numpy()[1:]))
        fit.append(time.perf_counter() - t0)
    return pd.DataFrame([{"what": "joint_hypothesis (999 surrogates, 4 lags, 3 groups)", "runs": runs,
                          "median_s": float(np.median(whole)), "min_s": float(np.min(whole))},
                         {"what": "mixed_fit (MixedLM, two optimisers, LRT)", "runs": runs,
                          "median_s": float(np.median(fit)), "min_s": float(np.min(fit))}])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--reps", type=int, default=100)
    ap.add_argument("--surrogates", type=int, default=199)
    ap.add_argument("--years", type=int, default=40)
    ap.add_argument("--timing-runs", type=int, default=5)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--out", default=str(Path(__file__).parent / "out"))
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    with threadpool_limits(1):
        r = rates(args.reps, args.surrogates, args.years, args.seed)
        t = timing(args.timing_runs, args.years, args.seed)
    pd.set_option("display.width", 200)
    print(r.to_string(index=False))
    print(t.to_string(index=False))
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    r.to_csv(out / "joint_rates.csv", index=False)
    t.to_csv(out / "joint_timing.csv", index=False)


if __name__ == "__main__":
    main()
