"""Derive the bundled land-fraction grids from a 30 arc-second land/ocean mask.

Writes ``evaluation/data/land_fraction_1deg.nc`` and ``evaluation/data/land_fraction_0p25deg.nc``:
the area-weighted fraction of land (0..1) in each cell of a regular 1° and 0.25° grid, with
cell centres from -89.5 (-89.875) to 89.5 (89.875) in latitude (ascending) and from -179.5
(-179.875) to 179.5 (179.875) in longitude.

The source is the 1/120° mask shipped by the PyPI package ``global-land-mask`` (derived by
its authors from the GLOBE 30 arc-second elevation data).  That package is a tool for this
script only: it loads about 920 MB at import, so the ``evaluation`` package never imports it
and it is not a dependency of gridscore.  Run once, by hand, when the grids need rebuilding::

    pip install global-land-mask
    python scripts/make_land_fraction.py

Notes
-----
The mask's ``_mask`` array is True for ocean and runs from north to south, with the first
row and column at the north-west corner of each 1/120° pixel.  Inside one coarse cell every
fine row is weighted by its exact spherical area, proportional to sin(lat_n) - sin(lat_s); all
pixels of one row have the same area, so the fraction is the area-weighted mean over rows
of the per-row land share.  The mask has no missing values, so no cell is NaN.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import xarray as xr

FINE_PER_DEGREE = 120
OUT_DIR = Path(__file__).resolve().parents[1] / "evaluation" / "data"
# (file stem, cells per degree)
GRIDS = (("land_fraction_1deg", 1), ("land_fraction_0p25deg", 4))
# uint8 packing: 0..250 steps of 1/250 keep 0 and 1 exact and leave 255 for _FillValue
PACK_STEPS = 250


def load_land_mask() -> np.ndarray:
    """Return the 1/120° land mask (True = land), latitude ascending, longitude from -180.

    Notes
    -----
    Imported here and only here: the package holds about 920 MB once loaded.
    """
    from global_land_mask import globe  # script-time tool, see the module docstring

    ocean = globe._mask
    if ocean.shape != (180 * FINE_PER_DEGREE, 360 * FINE_PER_DEGREE):
        raise SystemExit(f"unexpected mask shape {ocean.shape}")
    if not (globe._lat[0] > globe._lat[-1] and np.isclose(globe._lon[0], -180.0)):
        raise SystemExit("unexpected mask orientation (expected north to south, from -180)")
    return ~ocean[::-1]


def block_land_fraction(land: np.ndarray, cells_per_degree: int) -> np.ndarray:
    """Area-weighted block means of a fine latitude-ascending land mask.

    Parameters
    ----------
    land
        Boolean (lat, lon) mask at 1/120°, latitude ascending from -90, longitude from -180.
    cells_per_degree
        1 for a 1° grid, 4 for a 0.25° grid.

    Returns
    -------
    numpy.ndarray
        Land fraction in 0..1, shape (180 * cells_per_degree, 360 * cells_per_degree).
    """
    block = FINE_PER_DEGREE // cells_per_degree
    nlat, nlon = land.shape[0] // block, land.shape[1] // block
    # Land share of each fine row inside each coarse column: one pass over the big array.
    row_share = land.reshape(land.shape[0], nlon, block).sum(axis=2, dtype=np.int32) / block
    edges = np.deg2rad(np.linspace(-90.0, 90.0, land.shape[0] + 1))
    row_area = np.diff(np.sin(edges))
    weighted = (row_share * row_area[:, None]).reshape(nlat, block, nlon).sum(axis=1)
    return weighted / row_area.reshape(nlat, block).sum(axis=1)[:, None]


def spherical_area_weights(lat_edges: np.ndarray) -> np.ndarray:
    """Relative area of each latitude band, sin(lat_n) - sin(lat_s)."""
    return np.diff(np.sin(np.deg2rad(lat_edges)))


def land_fraction_dataset(fraction: np.ndarray, cells_per_degree: int) -> xr.Dataset:
    """Wrap a land fraction array as a CF dataset with bounds."""
    step = 1.0 / cells_per_degree
    lat_edges = np.linspace(-90.0, 90.0, fraction.shape[0] + 1)
    lon_edges = np.linspace(-180.0, 180.0, fraction.shape[1] + 1)
    lat = lat_edges[:-1] + step / 2
    lon = lon_edges[:-1] + step / 2
    label = "1 degree" if cells_per_degree == 1 else f"{step:g} degree"
    return xr.Dataset(
        {
            "sftlf": (
                ("lat", "lon"),
                fraction.astype(np.float32),
                {
                    "standard_name": "land_area_fraction",
                    "long_name": "land area fraction",
                    "units": "1",
                    "cell_methods": "area: mean",
                },
            ),
            "lat_bnds": (("lat", "nv"), np.stack([lat_edges[:-1], lat_edges[1:]], axis=1)),
            "lon_bnds": (("lon", "nv"), np.stack([lon_edges[:-1], lon_edges[1:]], axis=1)),
        },
        coords={
            "lat": (
                "lat",
                lat,
                {"standard_name": "latitude", "units": "degrees_north", "axis": "Y", "bounds": "lat_bnds"},
            ),
            "lon": (
                "lon",
                lon,
                {"standard_name": "longitude", "units": "degrees_east", "axis": "X", "bounds": "lon_bnds"},
            ),
        },
        attrs={
            "Conventions": "CF-1.10",
            "title": f"Land area fraction on a regular {label} grid",
            "source": "area-weighted block means of the 1/120 degree land/ocean mask of the "
            "global-land-mask package (derived from the GLOBE 30 arc-second elevation data)",
            "history": "written by scripts/make_land_fraction.py",
        },
    )


def write_land_fraction(ds: xr.Dataset, path: Path) -> None:
    """Write packed and compressed, through a temporary file so no half-written file is left."""
    encoding = {
        "sftlf": {
            "dtype": "uint8",
            "scale_factor": np.float32(1.0 / PACK_STEPS),  # float32 so it decodes to float32
            "add_offset": np.float32(0.0),
            "_FillValue": 255,
            "zlib": True,
            "complevel": 9,
            "shuffle": True,
        },
        "lat": {"_FillValue": None},
        "lon": {"_FillValue": None},
        "lat_bnds": {"_FillValue": None, "zlib": True},
        "lon_bnds": {"_FillValue": None, "zlib": True},
    }
    tmp = path.with_suffix(".nc.tmp")
    ds.to_netcdf(tmp, encoding=encoding, format="NETCDF4")
    tmp.replace(path)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--output", type=Path, default=OUT_DIR, help="folder for the files")
    args = parser.parse_args(argv)
    args.output.mkdir(parents=True, exist_ok=True)
    land = load_land_mask()
    for stem, cells_per_degree in GRIDS:
        fraction = block_land_fraction(land, cells_per_degree)
        ds = land_fraction_dataset(fraction, cells_per_degree)
        path = args.output / f"{stem}.nc"
        write_land_fraction(ds, path)
        # exact spherical cell areas; the longitude width is the same for every cell
        weights = spherical_area_weights(np.linspace(-90.0, 90.0, fraction.shape[0] + 1))
        stored = xr.open_dataset(path)["sftlf"].values
        global_land = float((stored * weights[:, None]).sum() / (weights.sum() * stored.shape[1]))
        print(f"{path}: {path.stat().st_size / 1e3:.0f} kB, area-weighted land fraction {global_land:.4f}")


if __name__ == "__main__":
    main()
