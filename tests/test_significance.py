"""Comparison.difference_significance on real NetCDF files: the yearly season means are
rebuilt from the raw file contents (tests/cfdata.py, month-length weights, cftime) and
tested with scipy.stats.ttest_ind; the FDR mask with statsmodels' multipletests."""

from __future__ import annotations

import numpy as np
import pytest
from cfdata import exact_area, hand_season_means, read_monthly, write_cf
from scipy import stats
from statsmodels.stats.multitest import multipletests

from evaluation.scoring import Comparison, Source


def field(seed: float, *, bump: float = 0.0):
    def f(lat, lon, year, month):
        phi, lam = np.deg2rad(lat), np.deg2rad(lon)
        return (
            260.0 + 25.0 * np.cos(phi) ** 2 - 8.0 * np.sin(phi) * np.cos(2 * np.pi * (month - 1) / 12.0)
            + 0.6 * np.sin(12.9898 * year + seed + 3.0 * lam) * np.cos(phi + seed)
            + bump * (np.abs(lat) < 30.0)
        )

    return f


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, str]:
    tmp = tmp_path_factory.mktemp("significance")
    common = dict(dlat=15.0, start_year=1991, years=12, dtype="float64")
    return {
        "ref": str(write_cf(tmp / "ref.nc", field=field(0.0), **common)),
        "run": str(write_cf(tmp / "run.nc", field=field(1.7, bump=1.5), **common)),
    }


def test_unadjusted_test_equals_scipy_on_hand_season_means(files) -> None:
    cmp = Comparison(reference=Source("ref", "reference", [files["ref"]]), models=[Source("run", "model", [files["run"]])],
                     variable="tas", period="1992-2002", cache=False)
    got = cmp.difference_significance("run", "JJA", adjust=False)
    means = {}
    for name in ("run", "ref"):
        values, steps, cal, ds = read_monthly(files[name], "tas")
        seasons = hand_season_means(values, steps, cal, "JJA", 1992, 2002)
        means[name] = np.stack([seasons[y] for y in sorted(seasons)])
    ref = stats.ttest_ind(means["run"], means["ref"], axis=0, equal_var=True)  # Student's pooled test
    np.testing.assert_allclose(got["t"].values, ref.statistic, rtol=1e-9)
    np.testing.assert_allclose(got["pvalue"].values, ref.pvalue, rtol=1e-8, atol=1e-14)
    reject = multipletests(ref.pvalue.ravel(), alpha=0.10, method="fdr_bh")[0]
    assert got["significant"].values.ravel().tolist() == reject.tolist()
    # the tropical bump of 1.5 K stands out, and the significant area is the area of those cells
    area = exact_area(ds["lat_bnds"].values, ds["lon_bnds"].values)
    assert 0.0 < got.attrs["significant_area"] <= 1.0
    assert got.attrs["significant_area"] == pytest.approx(float((area * reject.reshape(area.shape)).sum() / area.sum()), rel=1e-12)

