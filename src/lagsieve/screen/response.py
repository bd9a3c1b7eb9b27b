"""Screen one response against all of its candidate drivers (one hypothesis per driver,
see :mod:`lagsieve.screen.hypothesis`), optionally in several processes."""
from __future__ import annotations

import logging
import sys
import time
import traceback
from dataclasses import dataclass

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from lagsieve.screen.hypothesis import screen_hypothesis

log = logging.getLogger(__name__)


@dataclass
class ResponseScreen:
    """Everything screened for one response: tidy frames, one row per unit."""

    screen: pd.DataFrame  # response x driver x lag x model
    hypotheses: pd.DataFrame  # response x driver (before study-wide q-values and grades)
    forecasts: pd.DataFrame  # out-of-sample forecasts of the real driver, by year
    nulls: pd.DataFrame  # surrogate statistics, for the report


NUMERICAL = (np.linalg.LinAlgError, ValueError, FloatingPointError, ZeroDivisionError)

#: Columns of the per-response tables when no hypothesis produced a row of them.
FORECAST_COLUMNS = ["response", "driver", "year", "observed"]
NULL_COLUMNS = ["response", "driver", "test", "statistic", "value", "observed"]


def failure_words(exc: BaseException) -> str:
    """The reason recorded for a hypothesis whose computation raised ``exc``: the message of a
    numerical failure as it is; anything else named by its type as well, so it can be traced."""
    words = " ".join(str(exc).split()) or type(exc).__name__
    return words if isinstance(exc, NUMERICAL) else f"{type(exc).__name__}: {words}"


def _screen_one(table, response, driver, lags, screen, se, season=None):
    """screen_hypothesis with any failure turned into a ``failed: <reason>`` row: one
    hypothesis never stops the others (the traceback goes to the job's log)."""
    rid = response["id"]
    try:
        return screen_hypothesis(table, response, driver, lags, screen, se, season)
    except Exception as exc:  # noqa: BLE001 - recorded in the row's status, the stage goes on
        if not isinstance(exc, NUMERICAL):
            traceback.print_exc(file=sys.stderr)
        why = failure_words(exc)
        s = pd.DataFrame([{"response": rid, "driver": driver["id"], "lag": k, "model": "linear",
                           "status": f"failed: {why}"} for k in lags])
        h = {"response": rid, "driver": driver["id"], "category": driver.get("category"),
             "expected_sign": driver.get("expected_sign"), "status": f"failed: {why}"}
        return s, h, None, None


def _screen_one_packed(args):
    with threadpool_limits(limits=1):
        return _screen_one(*args)


def _run_parallel(tasks: list[tuple], table: pd.DataFrame, workers: int, progress) -> list:
    """``_screen_one`` over ``tasks`` in ``workers`` processes; results in the order of tasks.

    Longest first (years observed x lags, a proxy of the work), so that the last task to
    start is a short one and the workers finish close together.
    """
    # imported here: the workflow's screen jobs run one process each (threads: 1), so only a
    # screen with workers > 1 (a call from Python) pays for the process pool's imports
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor, as_completed  # (the same reason)

    cost = [int(table[t[2]["id"]].notna().sum()) * len(t[3]) for t in tasks]
    order = sorted(range(len(tasks)), key=lambda i: -cost[i])
    results = [None] * len(tasks)
    with ProcessPoolExecutor(max_workers=min(workers, len(tasks)), mp_context=mp.get_context("fork")) as ex:
        futures = {ex.submit(_screen_one_packed, tasks[i]): i for i in order}
        for fut in as_completed(futures):
            results[futures[fut]] = fut.result()
            progress(tasks[futures[fut]][2]["id"])
    return results


class _Progress:
    """One log line per screened driver: response, driver k of n, elapsed seconds."""

    def __init__(self, response_id: str, n: int):
        self.response_id, self.n, self.k, self.t0 = response_id, n, 0, time.perf_counter()

    def __call__(self, driver_id: str) -> None:
        self.k += 1
        log.info("screen %s: driver %d of %d (%s) done, %.1f s", self.response_id, self.k, self.n, driver_id,
                 time.perf_counter() - self.t0)


def _concat(frames: list[pd.DataFrame], columns: list[str] | None = None) -> pd.DataFrame:
    """The frames stacked; with none, an empty frame with ``columns`` (so its CSV has a header)."""
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns)


def screen_response(table: pd.DataFrame, study, response_id: str, se_table: pd.DataFrame | None = None,
                    workers: int = 1, season=None) -> ResponseScreen:
    """Screen one response against every driver configured for it.

    A numerical failure inside one hypothesis is recorded in its row's ``status`` and the
    rest of the response is still screened. With ``workers > 1`` the drivers are screened in
    that many processes; every random draw is keyed by the driver
    (:func:`lagsieve.screen.hypothesis.driver_rng`), so the results are identical to a
    sequential run. ``season``: the :class:`lagsieve.screen.seasonal.SeasonScreen` of a season
    response (config ``by_season``).
    """
    response = next(r for r in study.responses if r["id"] == response_id)
    se = None if se_table is None or response_id not in se_table else se_table[response_id].to_numpy(float)
    tasks = [(table, response, d, study.lags_for(d), study.screen, se, season) for d in study.drivers_for(response_id)]
    progress = _Progress(response_id, len(tasks))
    if workers > 1 and len(tasks) > 1:
        results = _run_parallel(tasks, table, workers, progress)
    else:
        results = []
        for t in tasks:
            results.append(_screen_one(*t))
            progress(t[2]["id"])
    return ResponseScreen(
        screen=_concat([r[0] for r in results]),
        hypotheses=pd.DataFrame([r[1] for r in results]),
        forecasts=_concat([r[2] for r in results if r[2] is not None], FORECAST_COLUMNS),
        nulls=_concat([r[3] for r in results if r[3] is not None], NULL_COLUMNS),
    )
