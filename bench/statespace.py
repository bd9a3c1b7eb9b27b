"""The state-space refit of ``screen.state_space`` (lagsieve.stats.statespace): what one fit
costs, and how well it recovers the slope, its standard error and the observation share.

Simulated hypotheses with a known truth: x white noise (unit variance), y_t = 0.4 + 0.2 x_t +
u_t + eps_t, u AR(1) (phi 0.3 or 0.8) with stationary variance 0.02, eps ~ N(0, se_t^2) with
se_t uniform on [0.5 s, 1.5 s], s chosen so that the true observation share
mean(se^2) / (mean(se^2) + 0.02) is about 0.2 or 0.5; n = 20, 30, 40, 60 years. Each world is
fitted once (phi estimated), as the evidence stage fits a hypothesis graded weak or better.

Per cell: the median time of a fit, the share of fits that converged, the mean slope, the
coverage of the 95% Wald interval slope ± 1.96 se, the ratio of the mean reported se to the
sd of the slopes, and the mean estimated observation share against the true one. Also the
time of the first fit in a fresh process (statsmodels' import included). Prints the table and
writes it to ``--out`` (default ``bench/out/``, not tracked). Not a test: no time is asserted.

    python bench/statespace.py [--reps 100] [--seed 1] [--out bench/out]
"""
from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

STATIONARY_VAR = 0.02


def world(rng, n: int, phi: float, share: float):
    """One simulated hypothesis: (y, x, se, true observation share of this draw)."""
    x = rng.normal(size=n)
    innov = np.sqrt(STATIONARY_VAR * (1 - phi * phi))
    u = np.empty(n)
    u[0] = rng.normal(scale=np.sqrt(STATIONARY_VAR))
    for t in range(1, n):
        u[t] = phi * u[t - 1] + rng.normal(scale=innov)
    # mean of (c s)^2 for c ~ U(0.5, 1.5) is s^2 * 13/12: s sets the expected share
    s = np.sqrt(share / (1 - share) * STATIONARY_VAR * 12 / 13)
    se = s * rng.uniform(0.5, 1.5, n)
    y = 0.4 + 0.2 * x + u + rng.normal(size=n) * se
    ms = float(np.mean(se**2))
    return y, x, se, ms / (ms + STATIONARY_VAR)


def cell(fit, rng, n: int, phi: float, share: float, reps: int) -> dict:
    times, slopes, ses, shares, truth, conv = [], [], [], [], [], []
    for _ in range(reps):
        y, x, se, true_share = world(rng, n, phi, share)
        t0 = time.perf_counter()
        f = fit(y, x, se)
        times.append(time.perf_counter() - t0)
        slopes.append(f.beta[1])
        ses.append(f.beta_se[1])
        shares.append(f.obs_share)
        truth.append(true_share)
        conv.append(f.converged)
    slopes, ses = np.array(slopes), np.array(ses)
    return {"n": n, "phi": phi, "share_target": share, "reps": reps,
            "median_fit_s": float(np.median(times)), "converged": float(np.mean(conv)),
            "mean_slope": float(slopes.mean()), "coverage95": float(np.nanmean(np.abs(slopes - 0.2) <= 1.96 * ses)),
            "se_ratio": float(np.nanmean(ses) / slopes.std(ddof=1)),
            "mean_share": float(np.nanmean(shares)), "true_share": float(np.mean(truth))}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=100)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--out", type=Path, default=Path("bench/out"))
    args = parser.parse_args()
    t0 = time.perf_counter()
    from lagsieve.stats.statespace import known_error_regression  # timed: the first fit imports statsmodels

    rng = np.random.default_rng(np.random.SeedSequence([args.seed, 17]))
    known_error_regression(*world(rng, 40, 0.5, 0.3)[:3])
    print(f"first fit in this process (statsmodels imported): {time.perf_counter() - t0:.2f} s")
    rows = []
    with threadpool_limits(limits=1):  # as in the evidence stage
        for n in (20, 30, 40, 60):
            for phi in (0.3, 0.8):
                for share in (0.2, 0.5):
                    rows.append(cell(known_error_regression, rng, n, phi, share, args.reps))
                    print(" ".join(f"{k}={v:.3g}" if isinstance(v, float) else f"{k}={v}"
                                   for k, v in rows[-1].items()), flush=True)
    table = pd.DataFrame(rows)
    args.out.mkdir(parents=True, exist_ok=True)
    table.to_csv(args.out / "statespace.csv", index=False)
    print(f"median fit over all cells: {table['median_fit_s'].median():.3f} s; written: {args.out / 'statespace.csv'}")


if __name__ == "__main__":
    main()
