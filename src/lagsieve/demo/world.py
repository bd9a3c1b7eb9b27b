"""The invented world of the demonstration study: Merrow hake on the Caldrin Shelf.

EVERYTHING HERE IS INVENTED. The species ("Merrow hake"), the shelf ("Caldrin Shelf"), the
surveys, the assessment model and every number are made up by this module from a seed. They
describe no real stock, place, survey or agency.

The study is built to test a driver screen honestly. Its responses are the natural mortality
M of three age groups of the invented predator; its ten candidate drivers include three true
effects and seven decoys:

* a true lagged, threshold-shaped (hockey-stick) prey effect on the two older groups (the
  forage fish collapse once a decade, and once more in the final years, so the re-test on the
  last years can see the effect);
* a true linear spring-temperature effect on the youngest group only;
* a true linear cold-pool effect on the oldest group that switches off after an invented regime
  shift halfway through the record (present 1985-2004, zero from 2005);
* decoys that share the upward trend of M (a trend-only index, a logistic predator rise,
  a random-walk climate index), decoys collinear with a true driver (oxygen with
  temperature, a second prey index with the true prey), a hump-shaped fishing mortality and
  a pure noise index.

:func:`simulate_demo` returns a :class:`DemoData` (pandas frames and the truth table); it is
pure and deterministic from the seed (``numpy.random.default_rng(seed)`` only). The files
are written by :mod:`lagsieve.demo.write`, the config text and TRUTH.md by
:mod:`lagsieve.demo.texts`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.demo.fish import fish_samples

__all__ = [
    "DEFAULT_SEED",
    "DIP_WINDOWS",
    "DRIVERS",
    "DRIVER_IDS",
    "GROUPS",
    "HOLDOUT_YEARS",
    "LATE_DIP_WINDOW",
    "PARAMETERS",
    "RESPONSE_IDS",
    "ROLES",
    "DemoData",
    "simulate_demo",
    "truth_table",
]

DEFAULT_SEED = 20261201

#: Years of the (invented) assessment: the responses.
RESPONSE_YEARS = np.arange(1985, 2025)
#: Years of the (invented) surveys: one year more than the assessment, so lag 1 exists in 1985.
DRIVER_YEARS = np.arange(1984, 2025)
#: The climate index is an older record.
CLIMATE_YEARS = np.arange(1978, 2025)

#: Age groups of the invented assessment (the group column of mortality_by_age.csv).
GROUPS = ("age2", "age3-4", "age5plus")

#: Every parameter of the generating equations (TRUTH.md is written from this table).
PARAMETERS: dict[str, dict[str, float]] = {
    # Natural mortality M_g(t) = base_g + trend_g * (t - 1985) / 39 + prey_g + temp_g + cold_g + e_g(t)
    "m:age2": {"base": 0.38, "trend": 0.16, "prey_beta": 0.0, "temp_gamma": 0.060, "cold_delta": 0.0,
               "noise_phi": 0.40, "noise_sd": 0.022},
    "m:age3-4": {"base": 0.28, "trend": 0.14, "prey_beta": 0.12, "temp_gamma": 0.0, "cold_delta": 0.0,
                 "noise_phi": 0.40, "noise_sd": 0.024},
    "m:age5plus": {"base": 0.24, "trend": 0.20, "prey_beta": 0.32, "temp_gamma": 0.0, "cold_delta": 0.013,
                   "noise_phi": 0.40, "noise_sd": 0.022},
    # Forage fish biomass index (kt): log F = mu + AR(1) + dips; threshold of the M effect.
    "forage": {"log_mean": float(np.log(120.0)), "phi": 0.55, "innov_sd": 0.28,
               "threshold": 85.0, "dip_depth_min": 0.8, "dip_depth_max": 1.4},
    # Spring bottom temperature (deg C): monthly = clim(month) + annual anomaly
    # (+ spring anomaly in Mar-May) + monthly noise.
    "temperature": {"clim_mean": 5.2, "clim_amp": 1.6, "clim_peak_month": 9.0,
                    "anom_phi": 0.50, "anom_innov_sd": 0.45, "spring_sd": 0.30,
                    "month_sd": 0.18, "reference": 0.0},
    # Bottom oxygen (mg/L) = mean - slope * (spring temperature - its mean) + noise.
    "oxygen": {"mean": 7.6, "slope": 0.85, "noise_sd": 0.30},
    # Shrimp index: log S = mu + coupling * (log forage - its mean) + AR(1).
    "shrimp": {"log_mean": float(np.log(35.0)), "coupling": 0.45, "phi": 0.40,
               "innov_sd": 0.22},
    # Jellyfish index: log J = mu + rise * (t - 1984) / 40 + AR(1)  (trend only).
    "jellyfish": {"log_mean": float(np.log(1.6)), "rise": 1.40, "phi": 0.50,
                  "innov_sd": 0.17},
    # Climate index: random walk x_t = x_{t-1} + N(0, step_sd^2), centred on its mean.
    "climate": {"step_sd": 0.45},
    # Pinniped counts: floor + K / (1 + exp(-(t - mid) / scale)) times lognormal noise.
    "pinniped": {"floor": 400.0, "capacity": 9000.0, "mid_year": 2003.0, "scale": 3.5,
                 "noise_sd": 0.08},
    # Fishing mortality: low + hump * exp(-((t - peak) / width)^2) times lognormal noise.
    "fishing": {"low": 0.25, "hump": 0.50, "peak_year": 1997.0, "width": 8.0,
                "noise_sd": 0.08},
    # Zooplankton index: log Z = mu + AR(1) (pure noise decoy).
    "zooplankton": {"log_mean": float(np.log(15.0)), "phi": 0.60, "innov_sd": 0.25},
    # Summer cold-pool extent (1000 km2): mean + AR(1), no trend; its effect on M (cold_delta per
    # 1000 km2 above the mean, same year) holds up to last_year, the invented regime shift, and is
    # zero after it.
    "cold_pool": {"mean": 42.0, "phi": 0.35, "innov_sd": 9.0, "last_year": 2004},
    # Assessment standard errors: se = M * cv, cv ~ Uniform(cv_low, cv_high).
    "assessment": {"cv_low": 0.07, "cv_high": 0.13},
}

#: The windows of the forage collapses: one collapse per decade, at a random year in the window.
DIP_WINDOWS = ((1986, 1992), (1996, 2002), (2006, 2012), (2016, 2021))
#: The final response years the demo config keeps back for the re-test (validation.holdout_years).
HOLDOUT_YEARS = 5
#: One more, late collapse, added later from a stream of its own: it falls in the forage years
#: the re-test on the last five response years reads at lag 1 (2019-2023), so the re-test can
#: see the planted prey effect (without it those forage years stayed above the threshold).
LATE_DIP_WINDOW = (2020, 2022)
#: Gaps written as empty cells (decoy series only, so no gap touches a true effect).
GAPS = {"shrimp_index": (1991, 2009), "jellyfish_index": (1996,)}
#: Monthly temperature rows missing from the file; April 1993 leaves two spring months.
MISSING_MONTHS = ((1993, 4), (2006, 11))


@dataclass
class DemoData:
    """The invented demo study as pandas frames.

    Attributes
    ----------
    mortality:
        ``series, group, year, value, se``: M by age group (series ``m``), the responses.
    surveys_annual:
        wide annual table: ``year`` and one column per survey series (empty cells are gaps).
    indices_long:
        ``series, year, value``: further annual indices.
    bottom_temperature_monthly:
        ``series, year, month, value``: monthly bottom temperature (series ``bottom_temp``).
    truth:
        one row per response x driver: whether the driver truly affects the response, at
        which lag, with which shape and size, and the driver's role.
    components:
        ``response, year, baseline, trend, prey, temperature, cold_pool, noise, value``: the additive
        parts of every M value (value = sum of the parts, rounded as written).
    drivers:
        the annual driver values the equations used (``year`` plus one column per driver,
        ``bottom_temp`` as the Mar-May mean of the written monthly values, gaps not applied).
    seed:
        the seed of the generator.
    parameters:
        the parameters of the generating equations.
    """

    mortality: pd.DataFrame
    surveys_annual: pd.DataFrame
    indices_long: pd.DataFrame
    bottom_temperature_monthly: pd.DataFrame
    truth: pd.DataFrame
    components: pd.DataFrame
    drivers: pd.DataFrame
    seed: int
    parameters: dict = field(default_factory=dict)
    fish: pd.DataFrame | None = None   # the per-fish samples (lagsieve.demo.fish)


# --------------------------------------------------------------------------- drivers

DRIVERS = (
    # id, category, expected_sign, transform, file, label, unit: as in templates/config.yaml.j2
    # (tests/test_demo.py checks that the two agree)
    ("forage_biomass", "prey", "negative", "log", "surveys_annual.csv",
     "Forage fish biomass index", "kt"),
    ("shrimp_index", "prey", "negative", "log", "surveys_annual.csv",
     "Shrimp index", "kg per tow"),
    ("jellyfish_index", "other", "positive", "log", "surveys_annual.csv",
     "Jellyfish bycatch index", "kg per tow"),
    ("bottom_oxygen", "oxygen", "negative", "none", "surveys_annual.csv",
     "Bottom dissolved oxygen", "mg/L"),
    ("bottom_temp", "temperature", "positive", "none", "bottom_temperature_monthly.csv",
     "Spring (Mar-May) bottom temperature", "deg C"),
    ("zooplankton_index", "prey", "negative", "log", "indices_long.csv",
     "Zooplankton biomass index", "g/m2"),
    ("pinniped_abundance", "predator", "positive", "log", "indices_long.csv",
     "Pinniped abundance", "animals"),
    ("fishing_mortality", "fishing", "any", "none", "indices_long.csv",
     "Fishing mortality F, ages 3-6", "per year"),
    ("shelf_climate_index", "climate", "any", "none", "indices_long.csv",
     "Shelf climate index", "index"),
    ("cold_pool_extent", "temperature", "positive", "none", "indices_long.csv",
     "Summer cold-pool extent (bottom water below 2 deg C)", "1000 km2"),
)
DRIVER_IDS = tuple(d[0] for d in DRIVERS)
RESPONSE_IDS = tuple(f"m:{g}" for g in GROUPS)
#: Names of the random streams, in spawn order. Each component draws from its own child of
#: ``default_rng(seed)``. This order was picked once, among 40 orders, so that the realisation
#: at the default seed has no large chance correlation between a decoy and a response (the
#: largest detrended |r| of a decoy is about 0.25); TRUTH.md says so and prints the check. The
#: cold pool's effect, added later, changed M of ages 5+ in 1985-2004 and with it the chance
#: correlations of the decoys with that group (TRUTH.md gives the largest).
#: Other seeds give other realisations, where decoys can show chance associations. The cold
#: pool came later: its stream is spawned after the others, so every earlier stream is the child it
#: was and every other driver's series is unchanged. The late forage collapse came last, from the
#: last stream: it changes the forage index from LATE_DIP_WINDOW's first year on, M of the two
#: older groups from the year after, and (through the mean of log forage they are centred on) the
#: shrimp index and the fish samples a little in every year; nothing else.
_STREAMS = ("shrimp", "m:age3-4", "m:age5plus", "pinniped", "zooplankton", "forage",
            "fishing", "jellyfish", "temperature", "climate", "m:age2", "oxygen", "cold_pool",
            "forage_late")


def _ar1(rng: np.random.Generator, n: int, phi: float, innov_sd: float) -> np.ndarray:
    """A stationary AR(1) series (first value drawn from the stationary distribution)."""
    e = rng.normal(0.0, innov_sd, n)
    x = np.empty(n)
    x[0] = e[0] / np.sqrt(1.0 - phi**2)
    for i in range(1, n):
        x[i] = phi * x[i - 1] + e[i]
    return x


def _forage_dips(rng: np.random.Generator, years: np.ndarray, p: dict,
                 windows: tuple = DIP_WINDOWS) -> tuple[np.ndarray, list]:
    """Episodic collapses of the forage fish: one per window, at a random year in it.

    A dip of depth d lowers log biomass by d in its first year, then by d*0.55 and d*0.2
    in the next years when it lasts 2 or 3 years.
    """
    dips = np.zeros(years.size)
    events = []
    for start, stop in windows:
        y0 = int(rng.integers(start, stop + 1))
        depth = float(rng.uniform(p["dip_depth_min"], p["dip_depth_max"]))
        length = int(rng.integers(1, 4))
        profile = (1.0, 0.55, 0.2)[:length]
        for k, w in enumerate(profile):
            i = y0 - int(years[0]) + k
            if 0 <= i < years.size:
                dips[i] -= depth * w
        events.append((y0, round(depth, 2), length))
    return dips, events


def _streams(seed: int) -> dict[str, np.random.Generator]:
    """One independent stream per component, all spawned from ``default_rng(seed)``: changing
    one component's parameters never changes the random draws of another."""
    return dict(zip(_STREAMS, np.random.default_rng(seed).spawn(len(_STREAMS))))


# --------------------------------------------------------------------------- the drivers

def _forage(rng: np.random.Generator, late_rng: np.random.Generator, years: np.ndarray,
            p: dict) -> tuple[np.ndarray, list]:
    """Forage fish biomass as written (kt): AR(1) around a constant level plus one big dip
    per decade and the late dip (``late_rng``, LATE_DIP_WINDOW); no trend. Also the dip events."""
    dips, events = _forage_dips(rng, years, p)
    log_forage = p["log_mean"] + _ar1(rng, years.size, p["phi"], p["innov_sd"]) + dips
    late, late_events = _forage_dips(late_rng, years, p, (LATE_DIP_WINDOW,))
    return np.round(np.exp(log_forage + late), 1), events + late_events


def _temperature_monthly(rng: np.random.Generator, years: np.ndarray, p: dict) -> pd.DataFrame:
    """Monthly bottom temperature as written: climatology + annual anomaly (+ spring anomaly
    in Mar-May) + monthly noise, rounded, with the rows of MISSING_MONTHS left out."""
    n = years.size
    months = np.arange(1, 13)
    clim = p["clim_mean"] + p["clim_amp"] * np.cos(2 * np.pi * (months - p["clim_peak_month"]) / 12)
    anom = _ar1(rng, n, p["anom_phi"], p["anom_innov_sd"])
    spring_extra = rng.normal(0.0, p["spring_sd"], n)
    month_noise = rng.normal(0.0, p["month_sd"], (n, 12))
    spring_mask = (months >= 3) & (months <= 5)
    temp = clim[None, :] + anom[:, None] + spring_extra[:, None] * spring_mask[None, :] + month_noise
    monthly = pd.DataFrame({
        "series": "bottom_temp",
        "year": np.repeat(years, 12),
        "month": np.tile(months, n),
        "value": np.round(temp, 2).ravel(),
    })
    drop = np.zeros(len(monthly), dtype=bool)
    for y, m in MISSING_MONTHS:
        drop |= (monthly["year"].to_numpy() == y) & (monthly["month"].to_numpy() == m)
    return monthly.loc[~drop].reset_index(drop=True)


def _spring_mean_by_year(monthly: pd.DataFrame, years: np.ndarray) -> np.ndarray:
    """Spring temperature: the mean of the written Mar-May values of each year."""
    return (monthly[monthly["month"].between(3, 5)].groupby("year")["value"].mean()
            .reindex(years).to_numpy())


def _oxygen(rng: np.random.Generator, spring: np.ndarray, p: dict) -> np.ndarray:
    """Bottom oxygen, collinear with spring temperature (no effect)."""
    return np.round(p["mean"] - p["slope"] * (spring - float(np.mean(spring)))
                    + rng.normal(0.0, p["noise_sd"], spring.size), 2)


def _shrimp(rng: np.random.Generator, log_forage: np.ndarray, p: dict) -> np.ndarray:
    """Shrimp index, partly coupled to the forage fish of the same year (no effect)."""
    log_shrimp = (p["log_mean"] + p["coupling"] * (log_forage - log_forage.mean())
                  + _ar1(rng, log_forage.size, p["phi"], p["innov_sd"]))
    return np.round(np.exp(log_shrimp), 2)


def _jellyfish(rng: np.random.Generator, years: np.ndarray, p: dict) -> np.ndarray:
    """Jellyfish index: linear trend in log plus AR(1) noise (no effect, trend only)."""
    t01 = (years - years[0]) / (years[-1] - years[0])
    log_jelly = p["log_mean"] + p["rise"] * t01 + _ar1(rng, years.size, p["phi"], p["innov_sd"])
    return np.round(np.exp(log_jelly), 3)


def _climate(rng: np.random.Generator, p: dict) -> np.ndarray:
    """Climate index over CLIMATE_YEARS: a random walk, centred (no effect)."""
    walk = np.cumsum(rng.normal(0.0, p["step_sd"], CLIMATE_YEARS.size))
    return np.round(walk - walk.mean(), 3)


def _pinniped(rng: np.random.Generator, years: np.ndarray, p: dict) -> np.ndarray:
    """Pinniped counts: logistic rise times lognormal noise (no effect)."""
    logistic = p["floor"] + p["capacity"] / (1.0 + np.exp(-(years - p["mid_year"]) / p["scale"]))
    return np.round(logistic * np.exp(rng.normal(0.0, p["noise_sd"], years.size))).astype(int)


def _fishing(rng: np.random.Generator, years: np.ndarray, p: dict) -> np.ndarray:
    """Fishing mortality: a hump times lognormal noise (no effect)."""
    hump = p["low"] + p["hump"] * np.exp(-(((years - p["peak_year"]) / p["width"]) ** 2))
    return np.round(hump * np.exp(rng.normal(0.0, p["noise_sd"], years.size)), 3)


def _zooplankton(rng: np.random.Generator, n: int, p: dict) -> np.ndarray:
    """Zooplankton index: AR(1) noise around a level (no effect)."""
    return np.round(np.exp(p["log_mean"] + _ar1(rng, n, p["phi"], p["innov_sd"])), 2)


def _cold_pool(rng: np.random.Generator, n: int, p: dict) -> np.ndarray:
    """Summer cold-pool extent: AR(1) around a level, no trend (its effect on M switches off)."""
    return np.round(p["mean"] + _ar1(rng, n, p["phi"], p["innov_sd"]), 1)


@dataclass(frozen=True)
class _Drivers:
    """The simulated drivers: the annual table, the monthly temperature file, the whole
    climate record, the unrounded spring temperature and the forage dip events."""

    annual: pd.DataFrame
    monthly: pd.DataFrame
    climate: np.ndarray
    spring: np.ndarray
    dip_events: list


def _simulate_drivers(streams: dict[str, np.random.Generator]) -> _Drivers:
    P = PARAMETERS
    yrs = DRIVER_YEARS
    forage, dip_events = _forage(streams["forage"], streams["forage_late"], yrs, P["forage"])
    monthly = _temperature_monthly(streams["temperature"], yrs, P["temperature"])
    spring = _spring_mean_by_year(monthly, yrs)
    climate = _climate(streams["climate"], P["climate"])
    annual = pd.DataFrame({
        "year": yrs,
        "forage_biomass": forage,
        # the equations use the written (rounded) values
        "shrimp_index": _shrimp(streams["shrimp"], np.log(forage), P["shrimp"]),
        "jellyfish_index": _jellyfish(streams["jellyfish"], yrs, P["jellyfish"]),
        "bottom_oxygen": _oxygen(streams["oxygen"], spring, P["oxygen"]),
        "bottom_temp": np.round(spring, 4),
        "zooplankton_index": _zooplankton(streams["zooplankton"], yrs.size, P["zooplankton"]),
        "pinniped_abundance": _pinniped(streams["pinniped"], yrs, P["pinniped"]),
        "fishing_mortality": _fishing(streams["fishing"], yrs, P["fishing"]),
        "shelf_climate_index": climate[CLIMATE_YEARS >= yrs[0]],
        "cold_pool_extent": _cold_pool(streams["cold_pool"], yrs.size, P["cold_pool"]),
    })
    return _Drivers(annual=annual, monthly=monthly, climate=climate, spring=spring,
                    dip_events=dip_events)


def _surveys_annual(annual: pd.DataFrame) -> pd.DataFrame:
    """The wide survey file: four annual columns, with the GAPS as empty cells."""
    surveys = annual[["year", "forage_biomass", "shrimp_index", "jellyfish_index",
                      "bottom_oxygen"]].copy()
    for col, gap_years in GAPS.items():
        surveys[col] = surveys[col].astype(float)
        surveys.loc[surveys["year"].isin(gap_years), col] = np.nan
    return surveys


def _indices_long(drivers: _Drivers) -> pd.DataFrame:
    """The long file of further indices (the climate index with its whole, older record; the
    cold pool, added later, last, so the earlier rows are as they were)."""
    years = drivers.annual["year"].to_numpy()
    parts = [pd.DataFrame({"series": s, "year": years, "value": drivers.annual[s].to_numpy()})
             for s in ("zooplankton_index", "pinniped_abundance", "fishing_mortality")]
    parts.append(pd.DataFrame({"series": "shelf_climate_index", "year": CLIMATE_YEARS,
                               "value": drivers.climate}))
    parts.append(pd.DataFrame({"series": "cold_pool_extent", "year": years,
                               "value": drivers.annual["cold_pool_extent"].to_numpy()}))
    return pd.concat(parts, ignore_index=True)


# --------------------------------------------------------------------------- the responses

@dataclass(frozen=True)
class _Forcing:
    """What moves M in the response years: the 0-1 trend, the prey shortfall of the year
    before (hockey stick below the threshold), the spring temperature deviation and the
    cold-pool deviation from its mean up to the regime shift (zero after it)."""

    trend01: np.ndarray
    prey_shortfall: np.ndarray
    spring_dev: np.ndarray
    cold_dev: np.ndarray


def _forcing(drivers: _Drivers) -> _Forcing:
    ryrs = RESPONSE_YEARS
    idx = ryrs - DRIVER_YEARS[0]                 # row of year t in the driver arrays
    log_forage = np.log(drivers.annual["forage_biomass"].to_numpy())
    log_thr = float(np.log(PARAMETERS["forage"]["threshold"]))
    spring_mean = float(np.mean(drivers.spring))
    cold = drivers.annual["cold_pool_extent"].to_numpy()
    before_shift = ryrs <= PARAMETERS["cold_pool"]["last_year"]
    return _Forcing(
        trend01=(ryrs - ryrs[0]) / (ryrs[-1] - ryrs[0]),
        prey_shortfall=np.maximum(0.0, log_thr - log_forage[idx - 1]),
        spring_dev=drivers.spring[idx] - spring_mean - PARAMETERS["temperature"]["reference"],
        cold_dev=np.where(before_shift, cold[idx] - float(np.mean(cold)), 0.0),
    )


def _response(rng: np.random.Generator, rid: str, forcing: _Forcing) -> pd.DataFrame:
    """The additive parts of M for one age group (noise first, then the standard errors
    draw from the same stream; see :func:`_mortality`)."""
    pr = PARAMETERS[rid]
    n = RESPONSE_YEARS.size
    noise = _ar1(rng, n, pr["noise_phi"], pr["noise_sd"] * np.sqrt(1 - pr["noise_phi"] ** 2))
    base = np.full(n, pr["base"])
    trend = pr["trend"] * forcing.trend01
    prey = pr["prey_beta"] * forcing.prey_shortfall
    tmp = pr["temp_gamma"] * forcing.spring_dev
    cold = pr["cold_delta"] * forcing.cold_dev
    value = np.round(base + trend + prey + tmp + cold + noise, 4)  # + 0.0 leaves a sum as it was
    return pd.DataFrame({"response": rid, "year": RESPONSE_YEARS, "baseline": base,
                         "trend": trend, "prey": prey, "temperature": tmp, "cold_pool": cold,
                         "noise": noise, "value": value})


def _mortality(rng: np.random.Generator, group: str, parts: pd.DataFrame) -> pd.DataFrame:
    """The written rows of one age group: M and its standard error (se = M * cv)."""
    pa = PARAMETERS["assessment"]
    value = parts["value"].to_numpy()
    cv = rng.uniform(pa["cv_low"], pa["cv_high"], value.size)
    return pd.DataFrame({"series": "m", "group": group, "year": RESPONSE_YEARS,
                         "value": value, "se": np.round(value * cv, 4)})


def _simulate_responses(streams: dict[str, np.random.Generator],
                        forcing: _Forcing) -> tuple[pd.DataFrame, pd.DataFrame]:
    """M of every age group (the mortality file) and its additive parts (components)."""
    m_rows, comp_rows = [], []
    for group, rid in zip(GROUPS, RESPONSE_IDS):
        parts = _response(streams[rid], rid, forcing)
        m_rows.append(_mortality(streams[rid], group, parts))
        comp_rows.append(parts)
    if np.any(np.concatenate([f["value"].to_numpy() for f in m_rows]) <= 0):
        raise RuntimeError("demo generator produced a non-positive M; change the parameters")
    return pd.concat(m_rows, ignore_index=True), pd.concat(comp_rows, ignore_index=True)


# --------------------------------------------------------------------------- truth

ROLES = {
    "forage_biomass": "true effect (older ages)",
    "bottom_temp": "true effect (age 2 only)",
    "shrimp_index": "decoy: correlated with the true prey",
    "jellyfish_index": "decoy: shares the upward trend only",
    "bottom_oxygen": "decoy: collinear with temperature",
    "zooplankton_index": "decoy: independent noise",
    "pinniped_abundance": "decoy: logistic rise",
    "fishing_mortality": "decoy: hump-shaped history",
    "shelf_climate_index": "decoy: random walk",
    "cold_pool_extent": "true effect (ages 5+), switched off after a regime shift",
}


def truth_table() -> pd.DataFrame:
    """One row per response x driver: true effect or not, its lag, shape, size, the role."""
    P = PARAMETERS
    thr = P["forage"]["threshold"]
    rows = []
    for rid in RESPONSE_IDS:
        pr = P[rid]
        for d in DRIVER_IDS:
            effect, lag, shape, size = False, pd.NA, "none", ""
            if d == "forage_biomass" and pr["prey_beta"] > 0:
                effect, lag, shape = True, 1, "threshold (hockey stick)"
                size = (f"M rises by {pr['prey_beta']:.2f} per unit of log biomass below "
                        f"log({thr:g} kt) in the previous year; flat above")
            elif d == "bottom_temp" and pr["temp_gamma"] > 0:
                effect, lag, shape = True, 0, "linear"
                size = f"M rises by {pr['temp_gamma']:.3f} per deg C of spring temperature, same year"
            elif d == "cold_pool_extent" and pr["cold_delta"] > 0:
                last = P["cold_pool"]["last_year"]
                effect, lag, shape = True, 0, f"linear up to {last}, none after"
                size = (f"M rises by {pr['cold_delta']:.3f} per 1000 km2 of cold pool above its mean, same "
                        f"year, in {int(RESPONSE_YEARS[0])}-{last}; no effect from {last + 1} (regime shift)")
            rows.append({"response": rid, "driver": d, "true_effect": effect, "lag": lag,
                         "shape": shape, "size": size, "role": ROLES[d]})
    out = pd.DataFrame(rows)
    out["lag"] = out["lag"].astype("Int64")
    return out


# --------------------------------------------------------------------------- public API

def simulate_demo(seed: int = DEFAULT_SEED) -> DemoData:
    """Simulate the invented Merrow hake study; pure and deterministic from ``seed``."""
    seed = int(seed)
    streams = _streams(seed)
    drivers = _simulate_drivers(streams)
    mortality, components = _simulate_responses(streams, _forcing(drivers))
    params = {k: dict(v) for k, v in PARAMETERS.items()}
    params["derived"] = {"spring_temperature_mean": float(np.mean(drivers.spring)),
                         "log_forage_threshold": float(np.log(PARAMETERS["forage"]["threshold"])),
                         "forage_dips": drivers.dip_events,
                         "cold_pool_mean": float(np.mean(drivers.annual["cold_pool_extent"]))}
    return DemoData(mortality=mortality, surveys_annual=_surveys_annual(drivers.annual),
                    indices_long=_indices_long(drivers),
                    bottom_temperature_monthly=drivers.monthly, truth=truth_table(),
                    components=components, drivers=drivers.annual, seed=seed, parameters=params,
                    fish=fish_samples(seed, RESPONSE_YEARS, drivers.annual))
