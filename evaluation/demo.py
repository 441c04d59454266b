"""Deterministic generator of the invented demo scenario.

The scenario is a small collection of made-up sources: four model runs and two
observation-like reference products, all invented.  Their fields are built from analytic
shapes (meridional gradient, hemispherically opposite seasonal cycle that is larger over
land, a migrating rain belt, pressure highs and lows, orbital insolation) plus smooth
red-noise variability, warming trends that differ by source, and a few deliberately
injected biases so that rankings mean something.  :func:`write_demo` writes them as CF
NetCDF files with a TOML manifest and a README that documents every bias.

The same seed gives the same values on the same software stack; nothing in the files
depends on the clock.
"""

from __future__ import annotations

import math
import shutil
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from pathlib import Path

import cftime
import numpy as np
import xarray as xr
import xarray_regrid  # noqa: F401  (registers the .regrid accessor)
from scipy.signal import lfilter
from scipy.special import sph_harm_y

from evaluation.errors import InputError

__all__ = [
    "DEMO_MARKER",
    "ECCENTRICITY",
    "OBLIQUITY",
    "PERIHELION_LONGITUDE",
    "SIZES",
    "SOLAR_CONSTANT",
    "TIME_UNITS",
    "daily_insolation",
    "monthly_insolation",
    "write_demo",
]

# Kopp & Lean (2011), total solar irradiance at 1 au.
SOLAR_CONSTANT = 1361.0
# Present-day orbit (value from memory; J2000): eccentricity, obliquity in degrees and the
# longitude of perihelion measured from the vernal equinox, in degrees.
ECCENTRICITY = 0.0167
OBLIQUITY = 23.44
PERIHELION_LONGITUDE = 282.94
# Perihelion falls about 3 January: its position as a fraction of the calendar year.
PERIHELION_YEAR_FRACTION = 2.5 / 365.0
# Budyko (1969) linear outgoing longwave radiation, A + B * T(degC), in W m-2 and W m-2 K-1.
BUDYKO_A, BUDYKO_B = 203.3, 2.09
TIME_UNITS = "days since 1850-01-01"
LAST_YEAR = 2020
TREND_ORIGIN = 2000.5  # the warming patterns pass through zero here
MM_PER_DAY = 1.0 / 86400.0  # 1 mm of water per day in kg m-2 s-1
DEMO_MARKER = "# gridscore demo collection"

LAND_FRACTION_FILE = Path(__file__).with_name("data") / "land_fraction_1deg.nc"


# --------------------------------------------------------------------------- variables


@dataclass(frozen=True)
class VariableInfo:
    """CF metadata and storage precision of one demo variable."""

    standard_name: str
    long_name: str
    units: str
    kept_bits: int  # mantissa bits kept by BitRound quantisation in the committed sample


VARIABLES: dict[str, VariableInfo] = {
    "tas": VariableInfo("air_temperature", "near-surface air temperature", "K", 9),
    "pr": VariableInfo("precipitation_flux", "precipitation", "kg m-2 s-1", 4),
    "psl": VariableInfo("air_pressure_at_mean_sea_level", "sea-level pressure", "Pa", 9),
    "rsdt": VariableInfo("toa_incoming_shortwave_flux", "TOA incident shortwave radiation", "W m-2", 10),
    "rsut": VariableInfo("toa_outgoing_shortwave_flux", "TOA outgoing shortwave radiation", "W m-2", 6),
    "rlut": VariableInfo("toa_outgoing_longwave_flux", "TOA outgoing longwave radiation", "W m-2", 7),
    "ta": VariableInfo("air_temperature", "air temperature", "K", 7),
}
#: Variables on pressure levels, written for the last LEVEL_YEARS years only (they are
#: the largest files: one field per level).
LEVEL_VARIABLES = ("ta",)
LEVEL_YEARS = 5
#: Pressure levels (hPa) of the references; runs may have their own (SourcePlan.pressure_levels).
PRESSURE_LEVELS = (1000.0, 850.0, 500.0, 250.0)
#: Scale height (km) turning pressure into an approximate height, z = H ln(1000 hPa / p);
#: about 7.5 km in the troposphere (value from memory).
SCALE_HEIGHT_KM = 7.5
ALL_VARIABLES = tuple(VARIABLES)
LAND_FRACTION_INFO = VariableInfo("land_area_fraction", "land area fraction", "%", 8)


# --------------------------------------------------------------------------- scenario


@dataclass(frozen=True)
class GridLayout:
    """How a source lays out its regular grid on disk (exercises the normaliser)."""

    step: float
    lon_from_zero: bool = False  # longitudes 0..360 instead of -180..180
    lat_descending: bool = False
    names: tuple[str, str] = ("lat", "lon")
    bounds: bool = True


@dataclass(frozen=True)
class SourcePlan:
    """Everything that makes one invented source what it is."""

    name: str
    role: str
    colour: str
    layout: GridLayout
    calendar: str
    trend: float  # global-mean tas trend, K per decade
    albedo: float  # planetary albedo over the whole record
    net_toa: float  # global-mean net downward TOA flux over the record, W m-2
    summary: str
    net_toa_drift: float = 0.0  # W m-2 per decade
    toa_from: int | None = None  # first year of rsdt rsut rlut, like a satellite-era product
    start_delay: int = 0  # years after the collection's first year
    variables: tuple[str, ...] = ALL_VARIABLES
    pressure_levels: tuple[float, ...] = PRESSURE_LEVELS
    level_units: str = "hPa"
    variability: int = 0  # 0: the shared "observed" weather; others: a run's own
    biases: tuple[str, ...] = ()
    split_files: bool = False
    generic_errors: bool = True
    ensemble: str | None = None  # members of one ensemble share their model errors, not their weather
    errors_stream: int | None = None  # the stream of the model errors; default the variability's


REFERENCES = (
    SourcePlan(
        name="tessera-obs",
        role="reference",
        colour="#222222",
        layout=GridLayout(step=2.5),
        calendar="standard",
        trend=0.19,
        albedo=0.294,
        net_toa=0.7,
        toa_from=2001,
        summary="Observation-like gridded product; the invented 'truth' of the scenario, "
        "with no injected error.",
        generic_errors=False,
    ),
    SourcePlan(
        name="halyard-rean",
        role="reference",
        colour="#8c564b",
        layout=GridLayout(step=3.0, lon_from_zero=True),
        calendar="proleptic_gregorian",
        trend=0.16,
        albedo=0.294,
        net_toa=0.7,
        variables=("tas",),
        summary="Reanalysis-like second reference, each variable split into two files. It "
        "shares tessera-obs's weather but is 1 K warmer poleward of 60 degrees (tapered "
        "over 57.5-62.5) and warms less (0.16 against 0.19 K/decade), so scores depend on "
        "the reference chosen.",
        biases=("warm-polar", "reference-noise"),
        split_files=True,
        generic_errors=False,
    ),
)

RUNS = (
    SourcePlan(
        name="larkspur-2",
        role="model",
        colour="#1f77b4",
        layout=GridLayout(step=3.75, lon_from_zero=True, lat_descending=True),
        calendar="noleap",
        trend=0.22,
        albedo=0.296,
        net_toa=0.5,
        variability=1,
        summary="Injected bias: too cold over land in the northern extratropics, -3 K times "
        "the land fraction between 35N and 70N (tapered over 2.5 degrees), in every month; "
        "its air temperature (ta, on its own pressure levels 1000, 600, 400 and "
        "250 hPa, stored in Pa) has a cold upper troposphere, -3 K at 250 hPa falling "
        "linearly in log-pressure to 0 at 600 hPa.",
        biases=("cold-nh-land", "cold-upper"),
        pressure_levels=(1000.0, 600.0, 400.0, 250.0),
        level_units="Pa",
    ),
    SourcePlan(
        name="pumice-ctl",
        role="model",
        colour="#ff7f0e",
        layout=GridLayout(step=4.0, names=("latitude", "longitude"), bounds=False),
        calendar="360_day",
        trend=0.15,
        albedo=0.320,
        net_toa=0.6,
        variability=2,
        start_delay=4,
        variables=("tas", "pr", "rsdt", "rsut", "rlut"),
        summary="Starts 4 years after the others. Injected bias: too bright, "
        "planetary albedo 0.320 against the reference's 0.294 (about +9 W m-2 of reflected "
        "sunlight in the global mean), compensated by too little outgoing longwave so that "
        "the net TOA flux stays near +0.6 W m-2.",
    ),
    SourcePlan(
        name="tidewell-3",
        role="model",
        colour="#2ca02c",
        layout=GridLayout(step=3.75, bounds=False),
        calendar="proleptic_gregorian",
        trend=0.36,
        albedo=0.291,
        net_toa=0.8,
        variability=3,
        variables=("tas", "pr", "psl"),
        summary="Injected biases: a "
        "double-ITCZ-like rain band (+5 mm/day over the open Pacific, 160E-100W, between "
        "12S and 5S; the equatorial Pacific 30% drier) and a too strong warming trend "
        "(0.36 against the reference's 0.19 K/decade).",
        biases=("double-itcz",),
    ),
    SourcePlan(
        name="cobble-b",
        role="model",
        colour="#d62728",
        layout=GridLayout(step=4.0, lon_from_zero=True),
        calendar="365_day",
        trend=0.25,
        albedo=0.298,
        net_toa=0.6,
        net_toa_drift=0.5,
        variability=4,
        variables=("tas", "rsdt", "rsut", "rlut"),
        summary="Injected bias: the net TOA flux drifts upward by 0.5 W m-2 per "
        "decade (outgoing longwave falls through the run) around a record mean of +0.6 W m-2.",
    ),
)


#: An invented ensemble: three members of one model that share its injected biases and
#: model errors (one errors stream) but each have their own weather (internal variability).
ENSEMBLE_NAME = "fennel"
ENSEMBLE = tuple(
    SourcePlan(
        name=f"fennel-r{i}",
        role="model",
        colour=colour,
        layout=GridLayout(step=6.0, lon_from_zero=True),
        calendar="noleap",
        trend=0.24,
        albedo=0.295,
        net_toa=0.7,
        variability=40 + i,
        errors_stream=40,
        variables=("tas", "pr"),
        ensemble=ENSEMBLE_NAME,
        summary=f"Member {i} of the invented ensemble {ENSEMBLE_NAME}; the members differ only by their "
        "weather (internal variability). Injected biases, the same in every member: a warm Southern "
        "Ocean (+2 K over the ocean between 65S and 45S, tapered over 2.5 degrees) and 20% too much "
        "rain over the tropical oceans (20S-20N, tapered over 3 degrees).",
        biases=("warm-southern-ocean", "wet-tropical-ocean"),
    )
    for i, colour in ((1, "#6a3d9a"), (2, "#8e6bbf"), (3, "#b39ddb"))
)


@dataclass(frozen=True)
class DemoSize:
    """How big a demo collection is."""

    years: int
    step: float | None  # None: each source's own grid step
    step_factor: float  # multiplies each source's own step
    runs: int
    variables: tuple[str, ...]
    quantise: bool  # BitRound (the committed sample) or full float32
    complevel: int
    modes: int  # highest spherical-harmonic degree of the variability
    # benchmarks: every run carries every variable of the size, over the whole record
    uniform: bool = False
    ensemble: bool = False  # add the members of ENSEMBLE after the runs


SIZES: dict[str, DemoSize] = {
    "tiny": DemoSize(
        years=8,
        step=None,
        step_factor=3.0,
        runs=4,
        variables=ALL_VARIABLES,
        quantise=True,
        complevel=4,
        modes=6,
    ),
    "small": DemoSize(
        years=40,
        step=None,
        step_factor=1.0,
        runs=4,
        variables=ALL_VARIABLES,
        quantise=True,
        complevel=7,  # 9 saves 2 % more but takes four times as long
        modes=12,
        ensemble=True,
    ),
    "large": DemoSize(
        years=30,
        step=1.0,
        step_factor=1.0,
        runs=5,
        variables=("tas", "pr", "psl", "rlut"),
        quantise=False,
        complevel=1,
        modes=12,
        uniform=True,
    ),
}


def _extra_run(index: int) -> SourcePlan:
    """A plain run beyond the four named ones (benchmarks ask for more)."""
    calendars = ("noleap", "standard", "360_day", "proleptic_gregorian")
    return SourcePlan(
        name=f"extra-{index + 1:02d}",
        role="model",
        colour="#7f7f7f",
        layout=GridLayout(step=2.0, lon_from_zero=bool(index % 2)),
        calendar=calendars[index % len(calendars)],
        trend=0.18 + 0.02 * (index % 5),
        albedo=0.292 + 0.002 * (index % 4),
        net_toa=0.7,
        variability=10 + index,
        summary="Additional run with only the generic errors every run has.",
    )


def scenario_runs(count: int) -> tuple[SourcePlan, ...]:
    """The first ``count`` runs of the scenario, extended with plain runs if needed."""
    return RUNS[:count] + tuple(_extra_run(i) for i in range(len(RUNS), count))


# --------------------------------------------------------------------------- grids


@dataclass(frozen=True)
class Grid:
    """A regular grid in canonical order (latitude ascending, longitude from -180)."""

    step: float

    @property
    def lat_edges(self) -> np.ndarray:
        return np.linspace(-90.0, 90.0, round(180 / self.step) + 1)

    @property
    def lon_edges(self) -> np.ndarray:
        return np.linspace(-180.0, 180.0, round(360 / self.step) + 1)

    @property
    def lat(self) -> np.ndarray:
        edges = self.lat_edges
        return (edges[:-1] + edges[1:]) / 2

    @property
    def lon(self) -> np.ndarray:
        edges = self.lon_edges
        return (edges[:-1] + edges[1:]) / 2

    def area_weights(self) -> np.ndarray:
        """Relative exact spherical cell areas, (lat, lon), summing to 1."""
        band = np.diff(np.sin(np.deg2rad(self.lat_edges)))
        weights = np.repeat(band[:, None], self.lon.size, axis=1)
        return weights / weights.sum()

    def land_fraction(self) -> np.ndarray:
        """The bundled 1 degree land fraction remapped conservatively, in 0..1."""
        # xarray-regrid does the conservative remap; a 1 degree grid is its own answer.
        with xr.open_dataset(LAND_FRACTION_FILE) as ds:
            source = ds["sftlf"].load().astype(np.float64)
        if self.step == 1.0:
            return source.values
        target = xr.Dataset(coords={"lat": self.lat, "lon": self.lon})
        remapped = source.regrid.conservative(target, latitude_coord="lat")
        # the remap is a BLAS product (float64 here: its CPU-dependent last bits are
        # ~1e-16); rounding to 2^-24 drops them unless a value lies that close to a
        # rounding midpoint (about one cell in 10^8)
        return np.clip(np.round(remapped.values * 2.0**24) / 2.0**24, 0.0, 1.0)


def _harmonics(grid: Grid, degree: int) -> tuple[np.ndarray, np.ndarray]:
    """Real spherical harmonics up to ``degree`` on the grid, unit mean square each.

    Returns the basis (modes, lat, lon) and each mode's degree.
    """
    colat = np.deg2rad(90.0 - grid.lat)[:, None]
    lon = np.deg2rad(grid.lon)[None, :]
    modes: list[np.ndarray] = []
    degrees: list[int] = []
    for n in range(degree + 1):
        for m in range(n + 1):
            y = sph_harm_y(n, m, colat, lon) * np.sqrt(4 * np.pi)
            modes.append(np.broadcast_to(y.real * (np.sqrt(2) if m else 1.0), (grid.lat.size, grid.lon.size)))
            degrees.append(n)
            if m:
                modes.append(np.broadcast_to(y.imag * np.sqrt(2), (grid.lat.size, grid.lon.size)))
                degrees.append(n)
    return np.stack(modes), np.asarray(degrees)


def _spectrum(degrees: np.ndarray, slope: float) -> np.ndarray:
    """Mode amplitudes with a red spectrum, scaled so the field has unit mean square."""
    amplitude = (degrees + 1.0) ** (-slope)
    return amplitude / np.sqrt((amplitude**2).sum())


# --------------------------------------------------------------------------- time


@dataclass(frozen=True)
class TimeAxis:
    """Monthly CF time axis of one source: numeric values in :data:`TIME_UNITS`."""

    calendar: str
    first_year: int
    last_year: int

    def month_starts(self) -> np.ndarray:
        dates = [
            cftime.datetime(y, m, 1, calendar=self.calendar)
            for y in range(self.first_year, self.last_year + 2)
            for m in range(1, 13)
        ]
        return np.asarray(
            cftime.date2num(dates[: self.months + 1], TIME_UNITS, calendar=self.calendar), dtype=np.float64
        )

    @property
    def months(self) -> int:
        return 12 * (self.last_year - self.first_year + 1)

    def bounds(self) -> np.ndarray:
        starts = self.month_starts()
        return np.stack([starts[:-1], starts[1:]], axis=1)

    def decimal_years(self) -> np.ndarray:
        """Mid-month time as fractional years, calendar-independent."""
        index = np.arange(self.months)
        return self.first_year + (index + 0.5) / 12.0


# --------------------------------------------------------------------------- insolation


def _true_anomaly(mean_anomaly: np.ndarray, eccentricity: float) -> np.ndarray:
    """Solve Kepler's equation E - e sin E = M by Newton steps; return the true anomaly."""
    ecc_anomaly = mean_anomaly.copy()
    for _ in range(6):  # e = 0.0167 converges to machine precision in 3-4 steps
        ecc_anomaly -= (ecc_anomaly - eccentricity * np.sin(ecc_anomaly) - mean_anomaly) / (
            1 - eccentricity * np.cos(ecc_anomaly)
        )
    return 2 * np.arctan2(
        np.sqrt(1 + eccentricity) * np.sin(ecc_anomaly / 2),
        np.sqrt(1 - eccentricity) * np.cos(ecc_anomaly / 2),
    )


def daily_insolation(
    lat: np.ndarray, year_fraction: np.ndarray, *, solar_constant: float = SOLAR_CONSTANT
) -> np.ndarray:
    """Daily-mean TOA insolation in W m-2, shape (days, lat).

    Parameters
    ----------
    lat
        Latitudes in degrees north.
    year_fraction
        Position of each day in its calendar year, 0..1 (noon of 1 January is 0.5/365).
    solar_constant
        Total solar irradiance at 1 au in W m-2.

    Notes
    -----
    Hartmann (2016, Global Physical Climatology, eq. 2.15):
    Q = S0/pi (a/d)^2 (h0 sin(phi) sin(delta) + cos(phi) cos(delta) sin(h0)), with the
    hour angle of sunset cos(h0) = -tan(phi) tan(delta) clipped for polar day and night.
    NaN latitudes give NaN rows.
    """
    mean_anomaly = 2 * np.pi * (np.asarray(year_fraction) - PERIHELION_YEAR_FRACTION)
    true_anomaly = _true_anomaly(mean_anomaly, ECCENTRICITY)
    solar_longitude = true_anomaly + np.deg2rad(PERIHELION_LONGITUDE)
    declination = np.arcsin(np.sin(np.deg2rad(OBLIQUITY)) * np.sin(solar_longitude))[:, None]
    distance = ((1 + ECCENTRICITY * np.cos(true_anomaly)) / (1 - ECCENTRICITY**2))[:, None] ** 2
    phi = np.deg2rad(np.asarray(lat))[None, :]
    cos_h0 = np.clip(-np.tan(phi) * np.tan(declination), -1.0, 1.0)
    h0 = np.arccos(cos_h0)
    return (
        (solar_constant / np.pi)
        * distance
        * (h0 * np.sin(phi) * np.sin(declination) + np.cos(phi) * np.cos(declination) * np.sin(h0))
    )


def monthly_insolation(lat: np.ndarray, axis: TimeAxis) -> np.ndarray:
    """Monthly means of the daily insolation for the source's calendar, (time, lat)."""
    bounds = axis.bounds()
    year_starts = np.asarray(
        cftime.date2num(
            [
                cftime.datetime(y, 1, 1, calendar=axis.calendar)
                for y in range(axis.first_year, axis.last_year + 2)
            ],
            TIME_UNITS,
            calendar=axis.calendar,
        ),
        dtype=np.float64,
    )
    lengths = np.rint(bounds[:, 1] - bounds[:, 0]).astype(int)
    day_start = np.repeat(bounds[:, 0], lengths) + np.concatenate([np.arange(n) for n in lengths])
    year_index = np.repeat(np.arange(axis.months) // 12, lengths)
    year_length = year_starts[year_index + 1] - year_starts[year_index]
    fraction = (day_start + 0.5 - year_starts[year_index]) / year_length
    daily = daily_insolation(lat, fraction)
    offsets = np.concatenate([[0], np.cumsum(lengths)[:-1]])
    return np.add.reduceat(daily, offsets, axis=0) / lengths[:, None]


# --------------------------------------------------------------------------- shapes


def _gauss(x: np.ndarray, centre: float, width: float) -> np.ndarray:
    return np.exp(-(((x - centre) / width) ** 2))


def _lon_gauss(lon: np.ndarray, centre: float, width: float) -> np.ndarray:
    """Gaussian in longitude that wraps around the globe."""
    distance = (lon - centre + 180.0) % 360.0 - 180.0
    return np.exp(-((distance / width) ** 2))


def _ramp(x: np.ndarray, start: float, end: float) -> np.ndarray:
    """Smooth 0 -> 1 step between ``start`` and ``end``."""
    t = np.clip((x - start) / (end - start), 0.0, 1.0)
    return t * t * (3 - 2 * t)


def _band(x: np.ndarray, south: float, north: float, taper: float) -> np.ndarray:
    return _ramp(x, south - taper, south + taper) * (1 - _ramp(x, north - taper, north + taper))


@dataclass(frozen=True)
class Geography:
    """Canonical 2-D coordinates and land fraction of one grid, broadcast to (lat, lon)."""

    lat: np.ndarray
    lon: np.ndarray
    land: np.ndarray

    @classmethod
    def of(cls, grid: Grid) -> Geography:
        lat, lon = np.meshgrid(grid.lat, grid.lon, indexing="ij")
        return cls(lat=lat, lon=lon, land=grid.land_fraction())

    @property
    def sin_lat(self) -> np.ndarray:
        return np.sin(np.deg2rad(self.lat))


# Mid-month position in the year for the 12 climatological months.
SEASON = (np.arange(12) + 0.5) / 12.0


def _cycle(phase: float) -> np.ndarray:
    """Annual harmonic peaking at year fraction ``phase``, shape (12, 1, 1)."""
    return np.cos(2 * np.pi * (SEASON - phase))[:, None, None]


def _itcz_latitude(geo: Geography, shift: float) -> np.ndarray:
    """Latitude of the rain belt per month, farther poleward over land (monsoons)."""
    return 5.0 + shift + (5.0 + 8.0 * geo.land)[None] * _cycle(0.58)


def tas_climatology(geo: Geography, *, season_scale: float = 1.0) -> np.ndarray:
    """Monthly climatology of tas in K, (12, lat, lon)."""
    s, f = geo.sin_lat, geo.land
    annual = (
        301.5
        - 40.0 * s**2
        - 14.0 * f * _ramp(-geo.lat, 62.0, 70.0)  # high Antarctic plateau
        - 4.0 * f * s**2  # continental interiors are colder at high latitude
        + 2.0 * f * _gauss(np.abs(geo.lat), 24.0, 9.0)  # subtropical deserts
        + 4.0 * _gauss(geo.lat, 60.0, 12.0) * _lon_gauss(geo.lon, -15.0, 35.0)  # warm North Atlantic
    )
    amplitude = np.abs(s) ** 1.3 * (3.0 + 16.0 * f) * season_scale
    # land peaks in mid July, the ocean about a month later; the sign flips across the equator
    cycle = f[None] * _cycle(0.54) + (1 - f)[None] * _cycle(0.62)
    return annual[None] + (amplitude * np.sign(geo.lat))[None] * cycle


def pr_climatology(geo: Geography, *, itcz_shift: float = 0.0) -> np.ndarray:
    """Monthly climatology of precipitation in mm/day, (12, lat, lon), positive."""
    lat, lon, f = geo.lat, geo.lon, geo.land
    itcz = _itcz_latitude(geo, itcz_shift)
    rain = (
        0.6
        + 9.0 * np.exp(-(((lat[None] - itcz) / 7.0) ** 2))
        + 3.0 * _gauss(np.abs(lat), 45.0, 12.0) * (1 + 0.3 * (1 - f))  # storm tracks
        + 4.0 * _gauss(lat, 0.0, 10.0) * _lon_gauss(lon, 130.0, 30.0)  # warm-pool rains
        - 3.0 * _gauss(lat, -1.0, 4.0) * _lon_gauss(lon, -110.0, 30.0)  # cold-tongue dryness
    )
    rain = rain * (1 - 0.7 * f * _gauss(np.abs(lat), 24.0, 9.0))  # dry subtropical land
    rain = rain * (0.2 + 0.8 * np.cos(np.deg2rad(lat)) ** 0.5)
    return 1.15 * np.maximum(rain, 0.05)  # 1.15 brings the global mean near 2.7 mm/day


def psl_climatology(geo: Geography, tas_season: np.ndarray) -> np.ndarray:
    """Monthly climatology of sea-level pressure in Pa, (12, lat, lon).

    ``tas_season`` is the seasonal tas anomaly: cold continents build winter highs.
    """
    lat, f = geo.lat, geo.land
    south = (lat < 0).astype(float)
    hpa = (
        1012.0
        - 4.0 * _gauss(lat, 0.0, 12.0)  # equatorial trough
        + 9.0 * _gauss(np.abs(lat), 32.0, 9.0)  # subtropical highs
        - (10.0 + 12.0 * south) * _gauss(np.abs(lat), 62.0, 7.0)  # subpolar lows
        + 6.0 * _gauss(np.abs(lat), 88.0, 10.0)  # polar highs
    )[None]
    winter_nh = (_cycle(0.04) + 1) / 2  # 1 in mid January, 0 in mid July
    lows = (
        8.0 * _gauss(lat, 55.0, 8.0) * _lon_gauss(geo.lon, -170.0, 25.0)
        + 8.0 * _gauss(lat, 62.0, 8.0) * _lon_gauss(geo.lon, -30.0, 25.0)
    )[None]
    hpa = hpa - lows * winter_nh - 0.6 * f[None] * tas_season
    return hpa * 100.0


def albedo_climatology(geo: Geography, *, itcz_shift: float = 0.0) -> np.ndarray:
    """Monthly planetary albedo before calibration, (12, lat, lon), in 0..1."""
    lat, lon, f = geo.lat, geo.lon, geo.land
    alat = np.abs(lat)
    winter = np.where(lat >= 0, 1, -1)[None] * _cycle(0.04)  # +1 in the local winter
    surface = (
        0.07 * (1 - f)
        + f * (0.17 + 0.13 * _gauss(alat, 23.0, 9.0))  # deserts are bright
        + f * 0.6 * _ramp(-lat, 60.0, 66.0)  # Antarctic ice sheet
        + f * 0.55 * _gauss(lat, 72.0, 8.0) * _lon_gauss(lon, -40.0, 20.0)  # Greenland
    )[None]
    snow = (f * _ramp(alat, 40.0, 60.0) * (lat > 0))[None] * 0.45 * np.clip(winter, 0, 1)
    sea_ice = ((1 - f) * _ramp(alat, 65.0, 78.0))[None] * (0.35 + 0.15 * winter)
    surface = np.clip(surface + snow + sea_ice, 0.03, 0.85)
    itcz = _itcz_latitude(geo, itcz_shift)
    cloud = (
        0.5
        + 0.2 * np.exp(-(((lat[None] - itcz) / 8.0) ** 2))
        - 0.2 * _gauss(alat, 22.0, 9.0)[None]
        + 0.25 * _gauss(alat, 58.0, 14.0)[None]
        + (
            0.3
            * (1 - f)
            * (
                _gauss(lat, -20.0, 10.0) * _lon_gauss(lon, -85.0, 20.0)
                + _gauss(lat, -18.0, 10.0) * _lon_gauss(lon, 5.0, 15.0)
                + _gauss(lat, 25.0, 8.0) * _lon_gauss(lon, -125.0, 20.0)
            )
        )[None]  # stratocumulus decks
    )
    cloud = np.clip(cloud, 0.1, 0.95)
    return 1 - (1 - surface) * (1 - 0.42 * cloud)


def _enso_pattern(geo: Geography) -> np.ndarray:
    return _gauss(geo.lat, 0.0, 12.0) * _lon_gauss(geo.lon, -135.0, 45.0)


# --------------------------------------------------------------------------- variability


class Streams:
    """Independent random streams keyed by purpose, all derived from one seed."""

    def __init__(self, seed: int) -> None:
        self.seed = seed

    def rng(self, *key: int) -> np.random.Generator:
        return np.random.default_rng(np.random.SeedSequence([self.seed, *key]))


# stream keys: what the random numbers are for
WEATHER, ERRORS, ENSO = 1, 2, 3
TAS_NOISE, PR_NOISE, PSL_NOISE, ALBEDO_NOISE, OLR_NOISE = range(5)


def _red_series(rng: np.random.Generator, months: int, count: int, rho: float) -> np.ndarray:
    """Stationary AR(1) series with unit variance, (months, count)."""
    shocks = rng.standard_normal((months, count))
    # x[t] = rho x[t-1] + sqrt(1 - rho^2) e[t], started from x[0] = e[0] (stationary)
    rest = lfilter([np.sqrt(1 - rho**2)], [1.0, -rho], shocks[1:], axis=0, zi=rho * shocks[:1])[0]
    return np.concatenate([shocks[:1], rest])


#: Why the generator avoids plain BLAS products.  OpenBLAS picks its kernel for the CPU at
#: run time, and kernels add the terms of a dot product in different orders; the float64
#: results then differ in their last bits from one machine to another, and the BitRound
#: quantisation of the committed sample turns the few values that lie that close to a
#: rounding midpoint into a one-step difference (e.g. 0.125 W m-2 of rsut between 8 and
#: 16 W m-2 at 6 kept bits).  Measured: regenerating with OPENBLAS_CORETYPE=Prescott
#: changed 5 values in 4 of 34 files before this was done, none after.  Products keep
#: this many fractional bits in their exact part (see :func:`_product`).
FIXED_POINT_BITS = 20


def _product(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a @ b`` whose result does not depend on the BLAS kernel's order of additions.

    Each factor is split into a multiple of 2^-FIXED_POINT_BITS and a remainder below
    2^-(FIXED_POINT_BITS+1).  The product of the two coarse parts is a sum of multiples of
    2^-(2 FIXED_POINT_BITS); while the sum of the absolute terms stays below 2^12 every
    partial sum is exact in float64, so any order gives the same bits.  The remainder
    terms are about 10^-6 of the result, so their own last-bit differences (~10^-22
    relative) reach the rounded result only about once in a million values, and a stored
    value only if that lands on a quantisation midpoint as well.
    """
    scale = 2.0**FIXED_POINT_BITS
    a_hi, b_hi = np.round(a * scale) / scale, np.round(b * scale) / scale
    if float((np.abs(a_hi) @ np.abs(b_hi)).max(initial=0.0)) >= 2.0 ** (52 - 2 * FIXED_POINT_BITS):
        raise ValueError("factors too large for an exact fixed-point product")
    return a_hi @ b_hi + ((a - a_hi) @ b + a_hi @ (b - b_hi))


@dataclass(frozen=True)
class Weather:
    """Smooth red-noise variability of one stream, defined on the collection's timeline.

    The series do not depend on the grid, so two sources that share a stream (the
    references) have the same weather wherever their grids are.
    """

    streams: Streams
    stream: int
    first_year: int
    months: int
    degree: int

    def field(
        self,
        kind: int,
        basis: np.ndarray,
        degrees: np.ndarray,
        offset: int,
        months: int,
        *,
        rho: float,
        slope: float = 0.75,
    ) -> np.ndarray:
        """Unit-RMS smooth noise, (months, lat, lon) for months offset..offset+months."""
        rng = self.streams.rng(WEATHER, self.stream, kind)
        series = _red_series(rng, self.months, degrees.size, rho)[offset : offset + months]
        flat = _product(series * _spectrum(degrees, slope), basis.reshape(degrees.size, -1))
        return flat.reshape(months, *basis.shape[1:])

    def enso(self, offset: int, months: int) -> np.ndarray:
        rng = self.streams.rng(WEATHER, self.stream, ENSO)
        return _red_series(rng, self.months, 1, 0.92)[offset : offset + months, 0]


@dataclass(frozen=True)
class ModelErrors:
    """Time-constant errors every run has: smooth random patterns and a few scalars."""

    tas: np.ndarray
    pr: np.ndarray
    psl: np.ndarray
    albedo: np.ndarray
    olr: np.ndarray
    season_scale: float
    itcz_shift: float

    @classmethod
    def none(cls, shape: tuple[int, int]) -> ModelErrors:
        zero = np.zeros(shape)
        return cls(zero, zero, zero, zero, zero, 1.0, 0.0)

    @classmethod
    def draw(cls, rng: np.random.Generator, grid: Grid) -> ModelErrors:
        basis, degrees = _harmonics(grid, 6)
        amplitude = _spectrum(degrees, 0.5)

        def pattern() -> np.ndarray:
            coefficients = (rng.standard_normal(degrees.size) * amplitude)[None, :]
            return _product(coefficients, basis.reshape(degrees.size, -1)).reshape(basis.shape[1:])

        return cls(
            tas=0.6 * pattern(),
            pr=0.15 * pattern(),
            psl=150.0 * pattern(),
            albedo=0.012 * pattern(),
            olr=3.0 * pattern(),
            season_scale=float(rng.uniform(0.88, 1.12)),
            itcz_shift=float(rng.uniform(-1.5, 1.5)),
        )


# --------------------------------------------------------------------------- fields


def _area_mean(field: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Area-weighted mean over the last two axes (weights sum to 1).

    numpy's own pairwise sum, not a BLAS product: its order of additions is fixed by the
    code, not by the CPU (see :data:`FIXED_POINT_BITS`).
    """
    return (field * weights).sum(axis=(-2, -1))


def _damp_global(noise: np.ndarray, weights: np.ndarray, *, keep: float = 0.4) -> np.ndarray:
    """Shrink the global mean of a noise field to ``keep`` of itself.

    Local noise amplitudes are realistic; without this their global mean would vary about
    twice as much as observed global means do (about 0.1 K from year to year).
    """
    return noise - (1 - keep) * _area_mean(noise, weights)[:, None, None]


def annual_global_trend(series: np.ndarray) -> float:
    """OLS slope per decade of the annual means (12-month blocks) of a monthly series.

    Applied to the monthly global means, this is the trend the scenario documents:
    months weigh equally, whatever the calendar.
    """
    annual = series.reshape(-1, 12).mean(axis=1)
    # the closed-form OLS slope with correctly rounded sums (math.fsum), not a LAPACK
    # least-squares fit whose last bits depend on the CPU
    x = np.arange(annual.size) - (annual.size - 1) / 2.0
    return math.fsum(x * annual) / math.fsum(x * x) * 10.0


def _trend_ramp(series: np.ndarray, target: float, years: np.ndarray, at: np.ndarray) -> np.ndarray:
    """Linear ramp over the times ``at`` that turns the trend of ``series`` into ``target``.

    ``series`` holds monthly global means at the times ``years``; records shorter than two
    years are left alone.
    """
    if series.size < 24:
        return np.zeros(at.size)
    delta = (target - annual_global_trend(series)) / 10.0
    return delta * (at - years.mean())


def _warming_pattern(geo: Geography, weights: np.ndarray) -> np.ndarray:
    """Polar-amplified, land-enhanced warming pattern with area mean 1."""
    s = geo.sin_lat
    pattern = 1.0 + 1.2 * s**4 + 0.8 * np.clip(s, 0, None) ** 2 + 0.4 * geo.land
    return pattern / _area_mean(pattern, weights)


def _pacific(lon: np.ndarray) -> np.ndarray:
    """Smooth weight for 160E..100W."""
    east = lon % 360.0
    return _band(east, 160.0, 260.0, 8.0)


def source_fields(
    plan: SourcePlan,
    grid: Grid,
    axis: TimeAxis,
    weather: Weather,
    errors: ModelErrors,
    *,
    own_noise: Weather | None = None,
    toa_first_year: int | None = None,
) -> dict[str, np.ndarray]:
    """Every variable of one source on its canonical grid, float32 (time, lat, lon).

    Notes
    -----
    The albedo and the net TOA flux are calibrated over the months from ``toa_first_year``
    (the whole record when None), the months that are written.  The result has no NaN.
    Large arrays are dropped as soon as they are stored, so that a century on a 1 degree
    grid fits in a few GB.
    """
    geo = Geography.of(grid)
    weights = grid.area_weights()
    basis, degrees = _harmonics(grid, weather.degree)
    offset = 12 * (axis.first_year - weather.first_year)
    months = axis.months
    month = np.arange(months) % 12
    years = axis.decimal_years()
    s, f = geo.sin_lat, geo.land
    out: dict[str, np.ndarray] = {"sftlf": (100.0 * f).astype(np.float32)}

    def noise(kind: int, rho: float) -> np.ndarray:
        values = weather.field(kind, basis, degrees, offset, months, rho=rho)
        if own_noise is not None and "reference-noise" in plan.biases:
            values = 0.95 * values + 0.3 * own_noise.field(kind, basis, degrees, offset, months, rho=rho)
        return values

    enso = weather.enso(offset, months)[:, None, None] * _enso_pattern(geo)[None]

    # --- temperature
    tas_clim = tas_climatology(geo, season_scale=errors.season_scale) + errors.tas[None]
    tas_season = tas_clim - tas_clim.mean(axis=0, keepdims=True)
    if "cold-nh-land" in plan.biases:
        tas_clim = tas_clim - 3.0 * (f * _band(geo.lat, 35.0, 70.0, 2.5))[None]
    if "warm-polar" in plan.biases:
        tas_clim = tas_clim + 1.0 * _ramp(np.abs(geo.lat), 57.5, 62.5)[None]
    if "warm-southern-ocean" in plan.biases:
        tas_clim = tas_clim + 2.0 * ((1 - f) * _band(geo.lat, -65.0, -45.0, 2.5))[None]
    pattern = _warming_pattern(geo, weights)[None]
    tas_noise = (0.4 + 0.8 * f + 1.6 * s**2)[None] * noise(TAS_NOISE, 0.55) + 0.9 * enso
    tas_noise = _damp_global(tas_noise, weights)
    tas = tas_clim[month] + tas_noise
    tas += (plan.trend / 10.0) * (years - TREND_ORIGIN)[:, None, None] * pattern
    # the noise has a trend of its own over a finite record: make the documented one exact
    tas += _trend_ramp(_area_mean(tas, weights), plan.trend, years, years)[:, None, None] * pattern
    out["tas"] = tas.astype(np.float32)
    del tas
    if "ta" in plan.variables:
        # only the months written (variable_years): a field per level is large
        written = 12 * (axis.last_year - variable_years(plan, axis, "ta")[0] + 1)
        out["ta"] = ta_field(plan, geo, out["tas"][-written:], tas_clim[month[-written:]])
    global_warming = plan.trend / 10.0 * (years - TREND_ORIGIN)

    # --- precipitation (mm/day while building, kg m-2 s-1 on output)
    pr_clim = pr_climatology(geo, itcz_shift=errors.itcz_shift) * np.exp(errors.pr)[None]
    if "double-itcz" in plan.biases:
        pacific = ((1 - f) * _pacific(geo.lon))[None]
        pr_clim = pr_clim * (1 - 0.3 * pacific * _gauss(geo.lat, 0.0, 3.0)[None])
        pr_clim = pr_clim + 5.0 * pacific * _band(geo.lat, -12.0, -5.0, 2.0)[None]
    if "wet-tropical-ocean" in plan.biases:
        pr_clim = pr_clim * (1 + 0.2 * ((1 - f) * _band(geo.lat, -20.0, 20.0, 3.0))[None])
    sigma = 0.3
    pr_mm = np.exp(sigma * noise(PR_NOISE, 0.3) - sigma**2 / 2 + 0.5 * enso - 0.125 * enso**2)
    pr_mm *= pr_clim[month]
    pr_mm *= (1 + 0.02 * global_warming)[:, None, None]  # about 2 % per kelvin
    out["pr"] = (pr_mm * MM_PER_DAY).astype(np.float32)
    # deep convection lowers the outgoing longwave where it rains more than 2 mm/day
    convection = np.clip(pr_mm - 2.0, 0.0, 12.0)
    del pr_mm

    # --- sea-level pressure
    psl_clim = psl_climatology(geo, tas_season) + errors.psl[None]
    out["psl"] = (psl_clim[month] + (100.0 + 500.0 * s**2)[None] * noise(PSL_NOISE, 0.3)).astype(np.float32)

    # --- top of the atmosphere; calibration works on monthly global means
    kept = slice(12 * ((toa_first_year or axis.first_year) - axis.first_year), None)
    zonal_weights = weights.sum(axis=1)
    insolation = monthly_insolation(grid.lat, axis)  # (time, lat): zonally uniform
    rsdt_mean = (insolation * zonal_weights).sum(axis=1)
    albedo = albedo_climatology(geo, itcz_shift=errors.itcz_shift) + errors.albedo[None]
    rsut = np.clip(albedo[month] + _damp_global(0.008 * noise(ALBEDO_NOISE, 0.3), weights), 0.03, 0.9)
    rsut *= insolation[:, :, None]
    rsut_mean = _area_mean(rsut, weights)
    # planetary albedo of the written months as planned: a linear shift of the albedo
    shift = plan.albedo - rsut_mean[kept].sum() / rsdt_mean[kept].sum()
    rsut += shift * insolation[:, :, None]
    rsut_mean += shift * rsdt_mean
    out["rsut"] = rsut.astype(np.float32)
    del rsut
    out["rsdt"] = np.broadcast_to(insolation[:, :, None], (months, *f.shape)).astype(np.float32)

    rlut = BUDYKO_A + BUDYKO_B * (tas_clim[month] - 273.15)
    rlut += 0.5 * BUDYKO_B * tas_noise
    del tas_noise
    rlut -= 3.0 * convection
    del convection
    rlut += errors.olr[None] + _damp_global(2.0 * noise(OLR_NOISE, 0.3), weights)
    net_mean = rsdt_mean - rsut_mean - _area_mean(rlut, weights)
    # impose the drift exactly (a ramp in rlut), then the mean net flux of the written months
    ramp = _trend_ramp(net_mean[kept], plan.net_toa_drift, years[kept], years)
    rlut -= ramp[:, None, None]
    net_mean += ramp
    rlut += net_mean[kept].mean() - plan.net_toa
    out["rlut"] = rlut.astype(np.float32)
    return out


def ta_field(plan: SourcePlan, geo: Geography, tas: np.ndarray, tas_clim: np.ndarray) -> np.ndarray:
    """Air temperature ``(time, level, lat, lon)`` on the source's pressure levels, float32.

    Near-surface temperature (its weather damped to half) cooled with height at a lapse
    rate of 6.5 K/km in the tropics and 4 K/km at the poles, with z = H ln(1000 hPa / p).
    Levels below the surface are missing (NaN, written as the fill value): over the
    Antarctic ice sheet (land south of 65S) every level below 700 hPa.
    """
    p = np.asarray(plan.pressure_levels, dtype="float64")
    z = SCALE_HEIGHT_KM * np.log(1000.0 / p)  # km
    lapse = 6.5 - 2.5 * geo.sin_lat**2  # K/km
    surface = 0.5 * tas + 0.5 * tas_clim  # half the weather: the free troposphere varies less
    ta = surface[:, None] - z[None, :, None, None] * lapse[None, None]
    if "cold-upper" in plan.biases:
        ln_p = np.log(p)
        ta -= (3.0 * np.clip((np.log(600.0) - ln_p) / (np.log(600.0) - np.log(250.0)), 0.0, 1.0))[None, :, None, None]
    below = (p > 700.0)[:, None, None] & ((geo.land > 0.5) & (geo.lat < -65.0))[None]
    ta = np.where(below[None], np.nan, ta)
    return ta.astype(np.float32)


def _pressure_coordinate(plan: SourcePlan) -> dict:
    """The ``plev`` coordinate of a source's level variables, in its own units."""
    factor = {"hPa": 1.0, "Pa": 100.0}[plan.level_units]
    values = np.asarray(plan.pressure_levels, dtype="float64") * factor
    attrs = {"standard_name": "air_pressure", "long_name": "pressure", "units": plan.level_units, "positive": "down", "axis": "Z"}
    return {"plev": ("plev", values, attrs)}


# --------------------------------------------------------------------------- files


def _layout_order(layout: GridLayout, grid: Grid) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Index arrays and coordinate values that turn the canonical grid into the layout."""
    lat_index = np.arange(grid.lat.size)[::-1] if layout.lat_descending else np.arange(grid.lat.size)
    lon = grid.lon
    lon_index = np.arange(lon.size)
    if layout.lon_from_zero:
        lon_index = np.argsort(lon % 360.0, kind="stable")
        lon = lon % 360.0
    return lat_index, lon_index, grid.lat[lat_index], lon[lon_index]


def _coordinates(layout: GridLayout, grid: Grid) -> tuple[dict, dict, np.ndarray, np.ndarray]:
    """xarray coordinate and bounds variables of the layout."""
    lat_name, lon_name = layout.names
    lat_index, lon_index, lat, lon = _layout_order(layout, grid)
    step = grid.step
    lat_attrs = {"standard_name": "latitude", "long_name": "latitude", "units": "degrees_north", "axis": "Y"}
    lon_attrs = {"standard_name": "longitude", "long_name": "longitude", "units": "degrees_east", "axis": "X"}
    data_vars: dict = {}
    if layout.bounds:
        lat_attrs["bounds"] = f"{lat_name}_bnds"
        lon_attrs["bounds"] = f"{lon_name}_bnds"
        lat_b = np.stack([lat - step / 2, lat + step / 2], axis=1)
        if layout.lat_descending:
            lat_b = lat_b[:, ::-1]
        data_vars[f"{lat_name}_bnds"] = ((lat_name, "bnds"), lat_b)
        data_vars[f"{lon_name}_bnds"] = (
            (lon_name, "bnds"),
            np.stack([lon - step / 2, lon + step / 2], axis=1),
        )
    coords = {lat_name: (lat_name, lat, lat_attrs), lon_name: (lon_name, lon, lon_attrs)}
    return coords, data_vars, lat_index, lon_index


def _encoding(info: VariableInfo, shape: tuple[int, ...], size: DemoSize) -> dict:
    enc: dict = {
        "dtype": "float32",
        "zlib": True,
        "complevel": size.complevel,
        "shuffle": True,
        "_FillValue": np.float32(1e20),
    }
    if size.quantise:
        # BitRound keeps this many mantissa bits: far below the scenario's signals, and it
        # lets zlib reach a few bits per value for the committed sample.
        enc.update(significant_digits=info.kept_bits, quantize_mode="BitRound")
    if len(shape) == 4:
        enc["chunksizes"] = (min(12, shape[0]), *shape[1:])
    if len(shape) == 3:
        enc["chunksizes"] = (min(12, shape[0]), shape[1], shape[2])
    return enc


def story(plan: SourcePlan, axis: TimeAxis) -> str:
    """What a source is and its injected biases, with the late start of its TOA fluxes."""
    late = toa_first_year(plan, axis)
    if late is None or not any(v in TOA_VARIABLES for v in plan.variables):
        return plan.summary
    return (
        f"{plan.summary} Its TOA fluxes start in {late}, like a satellite-era record, so "
        "comparisons of rsdt, rsut and rlut use a shorter common period."
    )


def describe(plan: SourcePlan, grid: Grid, axis: TimeAxis) -> str:
    """One paragraph on a source: its layout on disk, calendar, years, variables and biases."""
    layout = plan.layout
    parts = [
        f"{grid.step:g} degree grid",
        "longitudes 0..360" if layout.lon_from_zero else "longitudes -180..180",
        "latitude north to south" if layout.lat_descending else "latitude south to north",
        "with bounds" if layout.bounds else "without bounds",
    ]
    if layout.names != ("lat", "lon"):
        parts.append("coordinates named " + " and ".join(layout.names))
    late = toa_first_year(plan, axis)
    years = f"monthly {axis.first_year}-{axis.last_year}"
    if late is not None and any(v in TOA_VARIABLES for v in plan.variables):
        years += f" ({'/'.join(v for v in plan.variables if v in TOA_VARIABLES)} from {late})"
    return (
        f"{', '.join(parts)}; {plan.calendar} calendar; {years}; "
        f"variables {' '.join(plan.variables)} and sftlf. {story(plan, axis)}"
    )


def _global_attrs(plan: SourcePlan, size_name: str, seed: int, text: str) -> dict[str, str]:
    return {
        "Conventions": "CF-1.10",
        "title": f"{plan.name}: invented demo {'reference' if plan.role == 'reference' else 'model run'}",
        "source": "gridscore demo scenario; every value is synthetic and invented",
        "history": f"written by evaluation.demo.write_demo(size={size_name!r}, seed={seed})",
        "comment": text,
    }


def _write(ds: xr.Dataset, path: Path, encoding: dict) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".partial")
    ds.to_netcdf(tmp, format="NETCDF4", encoding=encoding)
    tmp.replace(path)


TOA_VARIABLES = ("rsdt", "rsut", "rlut")


def toa_first_year(plan: SourcePlan, axis: TimeAxis) -> int | None:
    """First year of the source's TOA files, None when they cover the whole record."""
    if plan.toa_from is None or plan.toa_from <= axis.first_year:
        return None
    return min(plan.toa_from, axis.last_year - 1)


def variable_years(plan: SourcePlan, axis: TimeAxis, variable: str) -> tuple[int, int]:
    """First and last year written for one variable of a source."""
    if variable in LEVEL_VARIABLES:
        return max(axis.first_year, axis.last_year - LEVEL_YEARS + 1), axis.last_year
    late = toa_first_year(plan, axis)
    if variable in TOA_VARIABLES and late is not None:
        return late, axis.last_year
    return axis.first_year, axis.last_year


def _file_spans(plan: SourcePlan, first: int, last: int) -> list[tuple[int, int]]:
    """Year spans of the files of one variable (two halves when the plan splits them)."""
    if not plan.split_files or last == first:
        return [(first, last)]
    middle = first + (last - first + 1) // 2
    return [(first, middle - 1), (middle, last)]


def write_source(
    folder: Path,
    plan: SourcePlan,
    fields: dict[str, np.ndarray],
    grid: Grid,
    axis: TimeAxis,
    *,
    variables: tuple[str, ...],
    size: DemoSize,
    size_name: str,
    seed: int,
) -> list[Path]:
    """Write one NetCDF file per variable (and the land fraction) of one source."""
    coords, bounds, lat_index, lon_index = _coordinates(plan.layout, grid)
    lat_name, lon_name = plan.layout.names
    attrs = _global_attrs(plan, size_name, seed, describe(plan, grid, axis))
    none = {"_FillValue": None}
    written = []
    time_bounds = axis.bounds()
    for var in variables:
        info = VARIABLES[var]
        data = fields[var][..., lat_index[:, None], lon_index[None, :]]
        dims, level_coord = ("time", lat_name, lon_name), {}
        if var in LEVEL_VARIABLES:
            dims, level_coord = ("time", "plev", lat_name, lon_name), _pressure_coordinate(plan)
        # level variables hold only their own years (see source_fields)
        start = variable_years(plan, axis, var)[0] if var in LEVEL_VARIABLES else axis.first_year
        for first, last in _file_spans(plan, *variable_years(plan, axis, var)):
            rows = slice(12 * (first - start), 12 * (last - start + 1))
            bounds_rows = slice(12 * (first - axis.first_year), 12 * (last - axis.first_year + 1))
            ds = xr.Dataset(
                {
                    var: (
                        dims,
                        data[rows],
                        {
                            "standard_name": info.standard_name,
                            "long_name": info.long_name,
                            "units": info.units,
                            "cell_methods": "time: mean",
                        },
                    ),
                    "time_bnds": (("time", "bnds"), time_bounds[bounds_rows]),
                    **bounds,
                },
                coords={
                    "time": (
                        "time",
                        time_bounds[bounds_rows].mean(axis=1),
                        {
                            "standard_name": "time",
                            "long_name": "time",
                            "units": TIME_UNITS,
                            "calendar": plan.calendar,
                            "axis": "T",
                            "bounds": "time_bnds",
                        },
                    ),
                    **coords,
                    **level_coord,
                },
                attrs=attrs,
            )
            encoding = {
                var: _encoding(info, ds[var].shape, size),
                **{name: none for name in ds.variables if name != var},
            }
            path = folder / f"{var}_{plan.name}_{first}01-{last}12.nc"
            _write(ds, path, encoding)
            written.append(path)
    land = fields["sftlf"][lat_index[:, None], lon_index[None, :]]
    ds = xr.Dataset(
        {
            "sftlf": (
                (lat_name, lon_name),
                land,
                {
                    "standard_name": LAND_FRACTION_INFO.standard_name,
                    "long_name": LAND_FRACTION_INFO.long_name,
                    "units": LAND_FRACTION_INFO.units,
                },
            ),
            **bounds,
        },
        coords=coords,
        attrs=attrs,
    )
    encoding = {
        "sftlf": _encoding(LAND_FRACTION_INFO, land.shape, size),
        **{name: none for name in ds.variables if name != "sftlf"},
    }
    path = folder / f"sftlf_{plan.name}.nc"
    _write(ds, path, encoding)
    written.append(path)
    return written


# --------------------------------------------------------------------------- collection


def _toml_string(text: str) -> str:
    """A TOML basic string (escapes backslash and quote; the texts here are one line)."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _folder_of(plan: SourcePlan) -> str:
    return f"{'references' if plan.role == 'reference' else 'runs'}/{plan.name}"


@dataclass(frozen=True)
class _Plan:
    """The collection to build: sources with their grids and time axes."""

    plans: tuple[SourcePlan, ...]
    grids: dict[str, Grid]
    axes: dict[str, TimeAxis]
    first_year: int

    def describe(self, plan: SourcePlan) -> str:
        return describe(plan, self.grids[plan.name], self.axes[plan.name])


def _manifest(build: _Plan, size_name: str, seed: int) -> str:
    members = sum(p.ensemble is not None for p in build.plans)
    runs = sum(p.role == "model" for p in build.plans) - members
    references = len(build.plans) - runs - members
    ensemble = f", an ensemble of {members} members" if members else ""
    lines = [
        DEMO_MARKER + f" (evaluation.demo.write_demo, size={size_name!r}, seed={seed}); "
        "rerunning `gridscore demo` on this folder replaces it",
        'title = "gridscore demo: an invented ensemble"',
        "description = "
        + _toml_string(
            f"Invented scenario, monthly {build.first_year}-{LAST_YEAR}: {runs} model runs{ensemble} and "
            f"{references} observation-like references; every name and value is synthetic. "
            "README.md lists the injected biases."
        ),
        "",
    ]
    for plan in build.plans:
        folder = _folder_of(plan)
        globs = (
            [f"{folder}/{v}_*.nc" for v in plan.variables] + [f"{folder}/sftlf_*.nc"]
            if plan.split_files
            else [f"{folder}/*.nc"]
        )
        lines += [
            "[[source]]",
            f"name = {_toml_string(plan.name)}",
            f"role = {_toml_string(plan.role)}",
            "paths = [" + ", ".join(_toml_string(g) for g in globs) + "]",
            f"colour = {_toml_string(plan.colour)}",
            *([f"ensemble = {_toml_string(plan.ensemble)}"] if plan.ensemble else []),
            f"description = {_toml_string(build.describe(plan))}",
            "",
        ]
    return "\n".join(lines)


def _readme(build: _Plan, size_name: str, seed: int, folder: str) -> str:
    rows = []
    for plan in build.plans:
        axis, grid, layout = build.axes[plan.name], build.grids[plan.name], plan.layout
        notes = [
            f"{grid.step:g}°",
            "lon 0..360" if layout.lon_from_zero else "lon -180..180",
            "lat N→S" if layout.lat_descending else "lat S→N",
            "bounds" if layout.bounds else "no bounds",
        ]
        if layout.names != ("lat", "lon"):
            notes.append("/".join(layout.names))
        late = toa_first_year(plan, axis)
        span = f"{axis.first_year}-{axis.last_year}" + (f" (TOA from {late})" if late else "")
        toa = f"{plan.net_toa:+.1f}" + (
            f", drift {plan.net_toa_drift:+.1f} per decade" if plan.net_toa_drift else ""
        )
        role = f"{plan.role} ({plan.ensemble} member)" if plan.ensemble else plan.role
        rows.append(
            f"| {plan.name} | {role} | {', '.join(notes)} | {plan.calendar} | "
            f"{span} | {' '.join(plan.variables)} | {plan.trend:.2f} | "
            f"{plan.albedo:.3f} | {toa} |"
        )
    spec = SIZES[size_name]
    bits = ", ".join(
        f"{name} {info.kept_bits} bits ({100 * 2.0 ** -(info.kept_bits + 1):.2g} %)"
        for name, info in VARIABLES.items()
    )
    rounding = (
        f"Values are rounded with BitRound to a few mantissa bits (at most a relative {bits}) "
        "and then zlib-compressed; this is far below every signal of the scenario."
        if spec.quantise
        else "Values are full float32, zlib-compressed."
    )
    header = [
        "# The gridscore demo collection",
        "",
        "<!-- written by evaluation.demo.write_demo with the data: edit the generator, not this file -->",
        "",
        "Everything here is invented: the source names, the grids and every value. The files",
        f"are written by `evaluation.demo.write_demo` (size {size_name!r}, seed {seed}) and",
        "`gridscore demo` writes the same collection; the same seed gives the same values.",
        "`manifest.toml` lists the sources. Each variable of each source is a CF NetCDF file",
        "`<variable>_<source>_<YYYYMM>-<YYYYMM>.nc`, and `sftlf_<source>.nc` holds the land",
        "fraction in %, remapped conservatively from the bundled 1° land fraction.",
        rounding,
        "",
        "## Sources",
        "",
        "| source | role | grid | calendar | years | variables | tas trend (K/decade) "
        "| planetary albedo | net TOA (W m-2) |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- |",
        *rows,
        "",
        "The generator makes these numbers exact for global means with exact spherical cell "
        "areas as weights, over all written months of a source: the tas trend (and the drift "
        "of the net TOA flux) is the OLS slope of the annual means of the monthly global means, "
        "the planetary albedo is sum(rsut)/sum(rsdt) and the net TOA flux the mean of "
        "rsdt − rsut − rlut.",
        "",
        "## What each source is, and the injected biases",
        "",
        *[f"- **{p.name}** ({p.role}): {story(p, build.axes[p.name])}" for p in build.plans],
        "",
        "Every run also has smooth random errors of its own (about 0.6 K in tas, 15 % in pr, "
        "150 Pa in psl, 0.012 in albedo and 3 W m-2 in rlut), a seasonal cycle up to 12 % too "
        "weak or too strong and a rain belt shifted by up to 1.5°, so no run is perfect.",
        "",
        *_ensemble_paragraph(build),
    ]
    construction = [
        "## How the fields are built",
        "",
        "- **tas**: about 300 K at the equator falling with sin² of latitude, a cold Antarctic "
        "plateau, warm subtropical deserts and a warm North Atlantic; a seasonal cycle of "
        "opposite sign in the two hemispheres, larger over land (up to about ±16 K) and a "
        "month later over the ocean.",
        "- **pr**: a rain belt that follows the sun (farther over land, like monsoons), storm "
        "tracks near 45°, dry subtropics, a wet western and a dry eastern equatorial Pacific; "
        "log-normal noise.",
        "- **psl**: equatorial trough, subtropical highs, subpolar lows (deeper in the south), "
        "polar highs, winter highs over cold continents and winter lows over the northern oceans.",
        f"- **rsdt**: daily-mean orbital insolation (S0 = {SOLAR_CONSTANT:g} W m-2, eccentricity "
        f"{ECCENTRICITY}, obliquity {OBLIQUITY}°, perihelion near 3 January) averaged over "
        "the days of each month of the source's own calendar.",
        "- **rsut**: planetary albedo × rsdt; the albedo comes from the surface (ocean, deserts, "
        "ice sheets, seasonal snow and sea ice) and clouds (rain belt, storm tracks, "
        "stratocumulus decks), shifted so that the global albedo is the table's.",
        f"- **rlut**: Budyko's {BUDYKO_A} + {BUDYKO_B}·T(°C) W m-2 less a deep-convection term, "
        "shifted so that the global net TOA flux is the table's.",
        f"- **ta** (air temperature on pressure levels, {', '.join(f'{p:g}' for p in PRESSURE_LEVELS)} hPa "
        f"in the references; the last {LEVEL_YEARS} years only, to keep the files small): tas with half its "
        f"weather, cooled with z = {SCALE_HEIGHT_KM:g} km × ln(1000 hPa / p) at 6.5 K/km in the tropics and "
        "4 K/km at the poles; missing (below the surface) at levels under 700 hPa over the Antarctic ice sheet.",
        f"- **variability**: smooth red noise (spherical harmonics up to degree {spec.modes}, "
        "month-to-month autocorrelation 0.3 to 0.55) plus an ENSO-like mode in the tropical "
        "Pacific (autocorrelation 0.92); its global mean is damped to a realistic ~0.1 K from "
        "year to year. The references share one weather sequence; each run has its own.",
        "- **warming**: linear in time, amplified towards the poles and over land, with the "
        "table's global-mean rate; precipitation grows by 2 % per kelvin of it.",
        "",
        "## Using it",
        "",
        "```",
        f"gridscore serve {folder}",
        f"gridscore score --reference '{folder}/references/tessera-obs/*.nc' \\",
        f"    --model larkspur-2='{folder}/runs/larkspur-2/*.nc' --variable tas --region land",
        *_ensemble_command(build, folder),
        "```",
        "",
    ]
    return "\n".join(header + construction)


def _ensembles(build: _Plan) -> dict[str, list[SourcePlan]]:
    groups: dict[str, list[SourcePlan]] = {}
    for plan in build.plans:
        if plan.ensemble:
            groups.setdefault(plan.ensemble, []).append(plan)
    return groups


def _ensemble_paragraph(build: _Plan) -> list[str]:
    lines = []
    for name, members in _ensembles(build).items():
        lines += [
            f"**{name}** is an ensemble of {len(members)} members ({', '.join(p.name for p in members)}; "
            f'`ensemble = "{name}"` in the manifest): one invented model run {len(members)} times. The members share '
            "the model's injected biases and its smooth errors (one random stream) and differ only by their weather, "
            "each an independent draw of the same red-noise variability, so their spread is internal variability and "
            "their mean has less of it than any member.",
            "",
        ]
    return lines


def _ensemble_command(build: _Plan, folder: str) -> list[str]:
    lines = []
    for name, members in _ensembles(build).items():
        models = " ".join(f"--model {p.name}='{folder}/runs/{p.name}/*.nc'" for p in members)
        lines += [
            f"gridscore score --reference '{folder}/references/tessera-obs/*.nc' \\",
            f"    {models} \\",
            f"    --ensemble {name}={','.join(p.name for p in members)} --variable tas",
        ]
    return lines


def _build_plan(size: DemoSize, runs: int, years: int) -> _Plan:
    first_year = LAST_YEAR - years + 1
    plans = []
    for plan in REFERENCES + scenario_runs(runs) + (ENSEMBLE if size.ensemble else ()):
        wanted = size.variables if size.uniform and plan.role == "model" else plan.variables
        variables = tuple(v for v in wanted if v in size.variables)
        plans.append(replace(plan, variables=variables, toa_from=None if size.uniform else plan.toa_from))
    grids = {
        p.name: Grid(size.step if size.step is not None else p.layout.step * size.step_factor) for p in plans
    }
    # a delayed start must leave at least two years
    axes = {
        p.name: TimeAxis(p.calendar, min(first_year + p.start_delay, LAST_YEAR - 1), LAST_YEAR) for p in plans
    }
    return _Plan(tuple(plans), grids, axes, first_year)


def _generate(build: _Plan, folder: Path, size: DemoSize, size_name: str, seed: int) -> Iterator[Path]:
    streams = Streams(seed)
    months = 12 * (LAST_YEAR - build.first_year + 1)
    for index, plan in enumerate(build.plans):
        grid, axis = build.grids[plan.name], build.axes[plan.name]
        weather = Weather(streams, plan.variability, build.first_year, months, size.modes)
        own = Weather(streams, 100 + index, build.first_year, months, size.modes)
        errors = (
            ModelErrors.draw(streams.rng(ERRORS, plan.variability if plan.errors_stream is None else plan.errors_stream), grid)
            if plan.generic_errors
            else ModelErrors.none((grid.lat.size, grid.lon.size))
        )
        fields = source_fields(
            plan, grid, axis, weather, errors, own_noise=own, toa_first_year=toa_first_year(plan, axis)
        )
        yield from write_source(
            folder / _folder_of(plan),
            plan,
            fields,
            grid,
            axis,
            variables=plan.variables,
            size=size,
            size_name=size_name,
            seed=seed,
        )


def _is_demo_folder(path: Path) -> bool:
    manifest = path / "manifest.toml"
    try:
        with manifest.open(encoding="utf-8") as stream:
            return stream.readline().startswith(DEMO_MARKER)
    except OSError:
        return False


def write_demo(
    directory: str | Path,
    *,
    size: str = "small",
    seed: int = 20261201,
    years: int | None = None,
    runs: int | None = None,
    progress: Callable[[Path], None] | None = None,
) -> Path:
    """Write the invented demo collection into ``directory`` and return its manifest path.

    Parameters
    ----------
    directory
        A new or empty folder, or a folder that holds an earlier demo collection (whose
        ``runs/``, ``references/``, ``manifest.toml`` and ``README.md`` are replaced).
    size
        ``"tiny"`` (coarse grids, 8 years: for tests), ``"small"`` (the committed sample:
        1981-2020 on 2.5-4 degree grids, about 25 MB) or ``"large"`` (every source on a 1
        degree grid, every run with tas pr psl rlut, full float32: for benchmarks; 30 years
        take about 1.5 minutes, 1.2 GB on disk and 2.6 GB of memory, 100 years about 4
        minutes, 4 GB and 8 GB).
    seed
        Seed of every random stream; the same seed gives the same values.
    years
        Number of years, ending in 2020; the size's default when None.
    runs
        Number of model runs; beyond the four named ones, plain extra runs are added.
    progress
        Called with the final path of each file once it is written (e.g. to print it).

    Returns
    -------
    pathlib.Path
        The ``manifest.toml`` of the collection.

    Raises
    ------
    InputError
        Unknown size, a non-positive number of years or runs, or a folder that is a file
        or already holds something other than a demo collection.

    Notes
    -----
    Files are first written into a hidden staging folder beside ``directory`` and moved in
    only when all succeeded, so an interrupted run leaves no half-written collection.  The
    data have no missing values.
    """
    if size not in SIZES:
        raise InputError(f"unknown demo size {size!r}", remedy=f"use one of {', '.join(SIZES)}")
    spec = SIZES[size]
    years = spec.years if years is None else int(years)
    runs = spec.runs if runs is None else int(runs)
    if years < 2 or runs < 1:
        raise InputError(
            f"a demo needs at least 2 years and 1 run, not years={years}, runs={runs}",
            remedy="pass larger values",
        )
    target = Path(directory).expanduser().resolve()
    if target.exists() and not target.is_dir():
        raise InputError("is a file, not a folder", file=target, remedy="name a new or empty folder")
    if target.is_dir() and any(target.iterdir()) and not _is_demo_folder(target):
        raise InputError(
            "folder is not empty and holds no demo collection",
            file=target,
            remedy="name a new or empty folder for the demo",
        )
    build = _build_plan(spec, runs, years)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{target.name}-", dir=target.parent))
    except OSError as err:
        raise InputError(
            f"cannot create the folder ({err.strerror})",
            file=target,
            remedy="choose a folder you can write to",
        ) from None
    try:
        for path in _generate(build, staging, spec, size, seed):
            if progress is not None:
                progress(target / path.relative_to(staging))
        (staging / "manifest.toml").write_text(_manifest(build, size, seed), encoding="utf-8")
        (staging / "README.md").write_text(_readme(build, size, seed, target.name), encoding="utf-8")
        target.mkdir(exist_ok=True)
        # renames on one file system: the old collection moves aside (and goes with the
        # staging folder) only once the new one is complete; the manifest comes last
        aside = staging / ".replaced"
        aside.mkdir()
        for name in ("manifest.toml", "README.md", "runs", "references"):
            if (target / name).exists():
                (target / name).replace(aside / name)
        for name in ("runs", "references", "README.md", "manifest.toml"):
            (staging / name).replace(target / name)
    except OSError as err:
        raise InputError(
            f"cannot write the demo ({err.strerror or err})",
            file=target,
            remedy="check the free space and permissions of the folder",
        ) from None
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return target / "manifest.toml"
