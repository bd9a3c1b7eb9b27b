"""The data of one run as the ledger needs them: the screen's annual table, the same values
before transforms (which are hashed), and the standard errors of weighted fits."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from lagsieve.io.config import Study
from lagsieve.ledger.fingerprint import training_hash, used_values
from lagsieve.ledger.forecast import LEVEL, NextYearForecast, next_year_forecast, training_years
from lagsieve.prep.align import annual_table, se_table


@dataclass
class StudyData:
    """The data of one run as the ledger needs them."""

    table: pd.DataFrame  # wide, transformed (the screen's table)
    raw: pd.DataFrame  # wide, before transforms (hashed)
    transforms: dict[str, str]
    se: pd.DataFrame | None = None  # transformed-scale standard errors, only for weighted fits
    raw_se: pd.DataFrame | None = None

    @classmethod
    def load(cls, study: Study, annual_csv: str | Path) -> "StudyData":
        """Read the `align` stage's tidy annual table of ``study``."""
        annual = pd.read_csv(annual_csv)
        transforms = study.transforms()
        raw = annual.pivot(index="year", columns="series", values="value").astype(float)
        se = raw_se = None
        if study.screen.get("weights") == "inverse-variance":
            se = se_table(annual, transforms)
            raw_se = annual.pivot(index="year", columns="series", values="se").astype(float)
        return cls(annual_table(annual, transforms), raw, transforms, se, raw_se)

    def forecast(self, response: str, driver: str, lag: int, baseline: str, level: float = LEVEL,
                 model: str = "linear") -> tuple[NextYearForecast | None, str]:
        """The next-year forecast of ``baseline`` + ``driver`` at ``lag`` on these data
        (:func:`lagsieve.ledger.forecast.next_year_forecast`)."""
        return next_year_forecast(self.table, self.raw, self.transforms, response, driver, lag, baseline,
                                  level, self.se, self.raw_se, model)

    def settings_sha(self, response: str, driver: str, lag: int, baseline: str) -> str:
        """The training hash without its cells: model, transforms and whether se weight the fit."""
        return training_hash(self.raw, self.transforms, response, driver, lag, baseline, [],
                             self.raw_se if self.se is not None else None)

    def training_sha(self, response: str, driver: str, lag: int, baseline: str, origin_year: int) -> str:
        """The training hash a forecast made at ``origin_year`` would have on these data."""
        years, *_ = training_years(self.table, response, driver, lag, origin_year)
        cells = used_values(response, driver, lag, years, origin_year)
        return training_hash(self.raw, self.transforms, response, driver, lag, baseline, cells,
                             self.raw_se if self.se is not None else None)
