"""What the stages share: the job log, the output contracts (column orders), the paths of a
study's per-response outputs and the reading of tables written by an earlier stage."""
from __future__ import annotations

import contextlib
import logging
import os
import sys
import time
import traceback
import warnings
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.io.config import Study
from lagsieve.io.names import slug
from lagsieve.prep.align import annual_table
from lagsieve.stages.allocator import spare_final_collection

SCREEN_COLUMNS = ["response", "driver", "lag", "model", "n", "first_year", "last_year", "r", "p_naive",
                  "n_eff", "p_adjusted", "r_detrended", "p_detrended", "r_diff", "p_differenced",
                  "trend_p_response", "trend_p_driver", "driver_trend_r2", "slope", "slope_se",
                  "p_surrogate_lag", "edf", "deviance_explained", "p_smooth", "shape", "season", "lag_unit", "status"]
EVIDENCE_COLUMNS = ["response", "driver", "category", "expected_sign", "season", "lag", "lag_unit", "model", "n", "first_year",
                    "last_year", "r", "p_naive", "n_eff", "p_adjusted", "r_detrended", "p_detrended", "r_diff",
                    "p_differenced", "trend_p_response", "trend_p_driver", "driver_trend_r2",
                    "slope", "slope_se", "slope_ci_low", "slope_ci_high", "r_ci_low", "r_ci_high",
                    "effect", "effect_ci_low", "effect_ci_high", "effect_basis", "effect_unit",
                    "effect_largest_allowed",
                    "p_surrogate", "p_surrogate_lag", "q_value", "oos_skill",
                    "oos_skill_climatology", "oos_skill_persistence", "oos_skill_trend", "oos_skill_trend_ar1",
                    "oos_n", "oos_p", "oos_test",
                    "oos_p_surrogate", "oos_hardest", "oos_lag", "oos_lag_share", "retest_skill", "retest_years",
                    "retest_model", "gam_gain", "edf", "shape", "grade", "flags", "rank", "collinear_with",
                    "rival", "rival_added_skill", "break_p", "break_f", "break_year", "break_year_low",
                    "break_year_high", "slope_before", "slope_before_se", "slope_after", "slope_after_se",
                    "break_note",
                    "ss_slope", "ss_slope_se", "ss_phi", "ss_process_var", "ss_obs_share", "ss_n", "ss_status",
                    "draw_n", "draw_grade_share", "draw_slope", "draw_slope_se", "draw_between_share",
                    "draw_fragile", "mohn_rho", "mohn_peels", "rt_skill", "rt_n", "rt_mode",
                    "summary", "status"]


PACE_SECONDS = 5.0  # at most one progress line per job in this many seconds on the terminal


class PacedHandler(logging.Handler):
    """Progress lines to the terminal at a readable pace: the first, then one at most every
    ``pace`` seconds (the job's log keeps every line)."""

    def __init__(self, stream, pace: float = PACE_SECONDS):
        super().__init__(logging.INFO)
        self.stream, self.pace, self.last = stream, pace, -float("inf")

    def emit(self, record: logging.LogRecord) -> None:
        now = time.monotonic()
        if now - self.last >= self.pace:
            self.last = now
            self.stream.write(f"lagsieve: {record.getMessage()}\n")
            self.stream.flush()


@contextmanager
def root_logging_to(fh):
    """Records of every logger (at INFO and above) written to the open file ``fh`` in
    logging's basic format while the block runs; the root logger's handlers and level put back
    afterwards, so that no handler is left writing to a closed file (a batch runs many studies'
    stages in one process, and the tests run stages in theirs)."""
    root = logging.getLogger()
    saved, level = root.handlers[:], root.level
    handler = logging.StreamHandler(fh)
    handler.setFormatter(logging.Formatter(logging.BASIC_FORMAT))
    root.handlers = [handler]
    root.setLevel(logging.INFO)  # setLevel, not the attribute: it clears the loggers' cached levels
    try:
        yield handler
    finally:
        root.handlers = saved
        root.setLevel(level)


@contextmanager
def logged(smk):
    """Send a Snakemake job's warnings, errors and progress to its ``log:`` file (when it has
    one), progress also to the terminal at a readable pace (:class:`PacedHandler`), and end the
    log with the job's own timing (:func:`stage_timing`), which ``bench/demo.py`` reads:
    Snakemake's log stamps whole seconds only. A failure leaves its traceback in the log and
    one line on the terminal; Ctrl-C one line in the log."""
    logs = list(getattr(smk, "log", []) or [])
    if not logs:
        yield
        return
    Path(logs[0]).parent.mkdir(parents=True, exist_ok=True)
    start = (time.time(), time.perf_counter(), os.times())
    progress = PacedHandler(sys.__stderr__)
    package = logging.getLogger("lagsieve")
    with open(logs[0], "w", encoding="utf-8") as fh, contextlib.redirect_stderr(fh), root_logging_to(fh):
        warnings.simplefilter("default")
        package.addHandler(progress)
        try:
            yield
        except KeyboardInterrupt:
            fh.write("lagsieve: interrupted\n")
            raise SystemExit(130) from None
        except SystemExit:
            raise
        except BaseException:
            traceback.print_exc(file=fh)
            fh.flush()
            sys.__stderr__.write(f"lagsieve: job failed; see {logs[0]}\n")
            raise SystemExit(1) from None
        finally:
            package.removeHandler(progress)
        fh.write(stage_timing(*start) + "\n")
    spare_final_collection()  # the job's process ends with its stage (see stages.allocator)


def process_age() -> float | None:
    """Seconds since this process started (Linux: ``/proc/self/stat`` against the boot clock,
    to 10 ms), None where that cannot be read."""
    try:
        with open("/proc/self/stat", encoding="ascii") as fh:
            ticks = int(fh.read().rsplit(")", 1)[1].split()[19])  # field 22, starttime
        return time.clock_gettime(time.CLOCK_BOOTTIME) - ticks / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError, AttributeError):
        return None


def cpu_since(cpu0: os.times_result, now: os.times_result | None = None) -> float:
    """CPU seconds (user + system) of this process since ``cpu0`` (``os.times()`` taken then)."""
    now = os.times() if now is None else now
    return now.user + now.system - cpu0.user - cpu0.system


def stage_timing(epoch0: float, wall0: float, cpu0: os.times_result) -> str:
    """The log's last line: the stage's start and end (epoch seconds), its wall seconds, the
    CPU seconds (user + system) of this process and of its ended worker processes since the
    start (``time.time``, ``time.perf_counter``, ``os.times`` taken then), and how long the
    process ran before the stage began (Python's start, Snakemake's preamble, the imports)."""
    now, wall = os.times(), time.perf_counter() - wall0
    own = cpu_since(cpu0, now)
    workers = now.children_user + now.children_system - cpu0.children_user - cpu0.children_system
    age = process_age()
    before = "unknown" if age is None else f"{max(age - wall, 0.0):.3f} s"
    return (f"lagsieve: stage took {wall:.3f} s wall, {max(own, 0.0):.3f} s CPU, "
            f"{max(workers, 0.0):.3f} s CPU in workers; from {epoch0:.3f} to {epoch0 + wall:.3f} (epoch s); "
            f"process start-up before it {before} ({cpu0.user + cpu0.system:.3f} s CPU)")


def ordered(df: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Contract columns first (created empty when their stage has not produced them)."""
    out = df.copy()
    for c in columns:
        if c not in out.columns:
            out[c] = np.nan
    return out[columns + [c for c in out.columns if c not in columns]]


def response_dirs(work: str | Path, study: Study) -> dict[str, Path]:
    """Where the screen writes each response's tables."""
    return {rid: Path(work) / "responses" / slug(rid) for rid in study.response_ids}


def load_table(study: Study, annual_csv: str | Path) -> pd.DataFrame:
    """The wide, transformed annual table of a study from the `align` output."""
    annual = pd.read_csv(annual_csv)
    return annual_table(annual, study.transforms())


def condition_table(condition) -> pd.DataFrame | None:
    """condition.csv as a frame; ``condition`` is its path, or a list of none or one path (as the
    workflow gives an optional input)."""
    if isinstance(condition, (list, tuple)):  # a Snakemake input list is a list
        condition = next(iter(condition), None)
    return None if condition is None else pd.read_csv(condition, keep_default_na=False, na_values=[""])
