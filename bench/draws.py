"""What judging a hypothesis draw by draw costs (a response's ``draws``, lagsieve.evidence.draws).

A simulated hypothesis (40 years, a driver with slope 0.8 on standardised values plus noise
0.5, 999 surrogates, lags 0-3) is screened once; then its grade is recomputed for D draws of the
response (the response plus noise of sd 0.1), with the line alone and with the line and the
spline. Per cell: the median over ``--repeats`` runs of the wall time of ``add_draws`` for one
hypothesis, and that time per draw; also the in-sample part alone (best-lag r and HAC slope of
every draw in one call). Prints the table and writes it to ``--out`` (default ``bench/out/``,
not tracked). Not a test: no time is asserted.

    python bench/draws.py [--draws 20 100] [--repeats 3] [--out bench/out]
"""
from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from lagsieve.evidence.draws import add_draws
from lagsieve.evidence.grading import grade_hypotheses
from lagsieve.prep.align import shift_batch
from lagsieve.screen.hypothesis import screen_hypothesis
from lagsieve.stats.draws import best_lag_stats, draw_slopes

LAGS = [0, 1, 2, 3]


def hypothesis(models: list[str], seed: int = 1):
    """(evidence row, table, nulls, screen settings) of one simulated hypothesis."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=40)
    y = 0.8 * x + 0.5 * rng.normal(size=40)
    table = pd.DataFrame({"m": y, "d": x}, index=pd.Index(np.arange(1980, 2020), name="year"))
    screen = {"models": models, "surrogates": 999, "gam_trend": True, "surrogate_method": "phase", "seed": 1,
              "lags": LAGS, "alpha": 0.05, "fdr": 0.10, "min_overlap": 15, "validation": {}}
    _, hyp, _, nulls = screen_hypothesis(table, {"id": "m"}, {"id": "d", "expected_sign": "positive"}, LAGS, screen)
    return grade_hypotheses(pd.DataFrame([hyp]), table, screen), table, nulls, screen


def timed(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--draws", type=int, nargs="+", default=[20, 100])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parent / "out")
    args = ap.parse_args()
    rows = []
    with threadpool_limits(limits=1):
        for models in (["linear"], ["linear", "gam"]):
            ev, table, nulls, screen = hypothesis(models)
            x = np.concatenate([shift_batch(table["d"].to_numpy(float)[None, :], k) for k in LAGS])
            for D in args.draws:
                Y = table["m"].to_numpy(float)[None, :] + 0.1 * np.random.default_rng(2).normal(size=(D, 40))
                whole = timed(lambda: add_draws(ev, table, {"m": Y}, nulls, {"d": LAGS}, screen), args.repeats)
                ins = timed(lambda: (best_lag_stats(x, Y, "positive"), draw_slopes(x[0], Y)), args.repeats)
                rows.append({"models": "+".join(models), "draws": D, "seconds": round(whole, 3),
                             "ms_per_draw": round(1000 * whole / D, 2), "in_sample_ms": round(1000 * ins, 2)})
    table_out = pd.DataFrame(rows)
    print(table_out.to_string(index=False))
    args.out.mkdir(parents=True, exist_ok=True)
    table_out.to_csv(args.out / "draws.csv", index=False)


if __name__ == "__main__":
    main()
