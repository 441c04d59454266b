"""Tests of evaluation.export: every table format read back with its own reader, NetCDF
fields read back with xarray/netCDF4/cftime, atomic writes and bad-input errors."""

from __future__ import annotations

import errno
import html.parser
import importlib.metadata
import io
import json
import os
import re
import subprocess
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path

import cftime
import dask.array
import netCDF4
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from evaluation import export
from evaluation.errors import InputError

# The tidy-table contract (shared/DESIGN.md), written out here rather than imported so that
# the module is checked against the contract and not against itself.
CONTRACT_COLUMNS = [
    "model",
    "reference",
    "variable",
    "level",
    "region",
    "season",
    "period",
    "metric",
    "value",
    "units",
]
CONTRACT_METRICS = [
    "mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "taylor_skill",
    "trend", "ref_trend", "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error",
]  # fmt: skip
KEYS = CONTRACT_COLUMNS[:7]
CONTRACT_FORMATS = ["csv", "xlsx", "md", "tex", "html", "json"]  # --output in shared/DESIGN.md
UNITLESS = {"corr", "std_ratio", "taylor_skill", "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error"}


@dataclass
class Source:
    """Anything with a name, a role and paths will do for provenance (export.SourceLike)."""

    name: str
    role: str
    paths: list[str] = field(default_factory=list)


@pytest.fixture
def tidy() -> pd.DataFrame:
    """2 models x 2 regions x 2 seasons x 14 metrics, names with underscores, some NaN."""
    rng = np.random.default_rng(20240607)
    rows = []
    for model in ["run_a", "run_b"]:
        for region in ["global", "box:-10,10,0,30"]:
            for season in ["ANN", "DJF"]:
                for metric in CONTRACT_METRICS:
                    # values over many magnitudes, most needing all 17 digits to round-trip
                    value = float(rng.normal() * 10.0 ** rng.integers(-6, 6))
                    if metric.endswith("pvalue"):
                        value = float(rng.uniform())
                    units = "1" if metric in UNITLESS else "K/decade" if metric.endswith("trend") else "K"
                    rows.append([model, "ref_obs", "tas", "850 hPa" if region == "global" else "", region, season, "1991-2020", metric, value, units])
    table = pd.DataFrame(rows, columns=CONTRACT_COLUMNS)
    table.loc[[3, 40, 77], "value"] = np.nan
    table.loc[5, "value"] = 1.0 / 3.0
    table.loc[6, "value"] = 2.5e-300
    return table


@pytest.fixture
def inputs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Real files whose size and modification time are known from how they were made."""
    # a folder of its own, so that tests can check tmp_path holds only what they wrote
    folder = tmp_path_factory.mktemp("inputs")
    files = {"run_a_1.nc": 123, "run_a_2.nc": 4567, "ref_obs.nc": 89}
    stamp = datetime(2001, 2, 3, 4, 5, 6, tzinfo=UTC).timestamp()
    for name, size in files.items():
        (folder / name).write_bytes(b"x" * size)
        os.utime(folder / name, (stamp, stamp))
    return {name: folder / name for name in files}


@pytest.fixture
def record(inputs: dict[str, Path]) -> dict:
    folder = inputs["ref_obs.nc"].parent
    return export.provenance(
        sources=[
            Source("run_a", "model", [str(folder / "run_a_*.nc")]),
            Source("run_b", "model", [str(folder / "absent_*.nc")]),
            Source("ref_obs", "reference", [inputs["ref_obs.nc"]]),
        ],
        variable="tas",
        period="1991-2020",
        seasons=["ANN", "DJF"],
        regions={"global": "the whole sphere", "box:-10,10,0,30": "10S-10N, 0-30E"},
        regrid="conservative",
        extra={"notes": "invented scenario; line one\nline two"},
    )


def close_to_shown(shown: str, value: float, metric: str) -> bool:
    """Whether ``shown`` is ``value`` rounded for reading (NaN shown as a dash)."""
    if np.isnan(value):
        return shown in {"–", "--"}
    # p-values: three decimals, "< 0.001" below (common practice in reporting p-values;
    # "\textless{}" is LaTeX's text "<")
    if metric.endswith("pvalue"):
        if value < 0.001:
            return shown.replace("\\textless{}", "<") == "< 0.001"
        return abs(float(shown) - value) <= 5e-4 + 1e-12
    # rounding to the shown digits: an error of at most half a unit in the last one
    # (common practice for rounding)
    mantissa, _, exponent = shown.partition("e")
    decimals = len(mantissa.partition(".")[2])
    unit = 10.0 ** (int(exponent or 0) - decimals)
    return abs(float(shown) - value) <= 0.5 * unit * (1 + 1e-9) + 1e-300


def shown_decimals(cells: list[str]) -> set[tuple[int, bool]]:
    """(decimals, scientific) of every number in a column (dashes and "< 0.001" left out)."""
    numbers = [c for c in cells if c not in {"–", "--"} and "0.001" not in c]
    return {(len(c.partition("e")[0].partition(".")[2]), "e" in c) for c in numbers}


def lookup(tidy: pd.DataFrame, row: pd.Series, metric: str) -> float:
    hit = tidy
    for key in KEYS:
        if key in row:  # a compact table leaves out the columns with one value
            hit = hit[hit[key] == row[key]]
    (value,) = hit.loc[hit["metric"] == metric, "value"]
    return value


# -- provenance -----------------------------------------------------------------------


def test_provenance_records_files_software_and_request(record: dict, inputs: dict[str, Path]) -> None:
    created = datetime.fromisoformat(record["created"])
    assert created.utcoffset() == timedelta(0)
    assert abs(datetime.now(UTC) - created) < timedelta(minutes=1)
    for package in ["xarray", "numpy", "dask", "pandas", "cftime", "xarray-regrid"]:
        assert record["software"][package] == importlib.metadata.version(package)
    assert "gridscore" in record["software"]

    by_path = {entry["path"]: entry for entry in record["inputs"]}
    # the glob matched both files of run_a; sizes and times are those the fixture set
    for name, size in [("run_a_1.nc", 123), ("run_a_2.nc", 4567), ("ref_obs.nc", 89)]:
        entry = by_path[str(inputs[name].resolve())]
        assert entry["size"] == size
        assert datetime.fromisoformat(entry["modified"]) == datetime(2001, 2, 3, 4, 5, 6, tzinfo=UTC)
    assert [e["role"] for e in record["inputs"]] == ["model", "model", "model", "reference"]
    (absent,) = [e for e in record["inputs"] if e["source"] == "run_b"]
    assert absent["size"] is None and absent["modified"] is None and absent["path"].endswith("absent_*.nc")

    assert record["variable"] == "tas" and record["period"] == "1991-2020"
    assert record["seasons"] == ["ANN", "DJF"] and record["regrid"] == "conservative"
    assert record["regions"]["box:-10,10,0,30"] == "10S-10N, 0-30E"
    assert record["reference"] == "ref_obs"
    assert record["notes"].startswith("invented scenario")
    assert json.loads(json.dumps(record)) == record  # JSON-ready as it is


# -- wide table -----------------------------------------------------------------------


def test_wide_table_holds_every_tidy_value_once(tidy: pd.DataFrame) -> None:
    wide = export.wide_table(tidy)
    assert list(wide.columns) == KEYS + CONTRACT_METRICS
    assert len(wide) == 2 * 2 * 2
    assert not wide[KEYS].duplicated().any()
    for _, row in wide.iterrows():
        for metric in CONTRACT_METRICS:
            expected = lookup(tidy, row, metric)
            assert row[metric] == expected or (np.isnan(expected) and np.isnan(row[metric]))


def test_wide_table_keeps_registry_order_whatever_the_row_order(tidy: pd.DataFrame) -> None:
    shuffled = tidy.sample(frac=1.0, random_state=3)
    extra = tidy.iloc[:1].assign(metric="zz_extra", value=7.0)
    wide = export.wide_table(pd.concat([extra, shuffled]))
    assert list(wide.columns) == KEYS + CONTRACT_METRICS + ["zz_extra"]
    assert wide["zz_extra"].notna().sum() == 1


def test_wide_table_refuses_duplicates(tidy: pd.DataFrame) -> None:
    with pytest.raises(InputError, match="more than once"):
        export.wide_table(pd.concat([tidy, tidy.iloc[:1]]))


# -- each format, read back with its own reader -----------------------------------------


def test_csv_is_the_plain_tidy_table_with_a_provenance_sidecar(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    target = tmp_path / "scores.csv"
    export.write_table(tidy, target, provenance=record)
    back = pd.read_csv(target)
    assert list(back.columns) == CONTRACT_COLUMNS
    # an empty level (a single-level variable) is an empty cell, which pandas reads as NaN
    back["level"] = back["level"].fillna("")
    # full precision: every double reads back identical (pandas writes repr of floats)
    pd.testing.assert_frame_equal(back, tidy, check_exact=True, check_dtype=False)
    assert target.read_text().splitlines()[0] == ",".join(CONTRACT_COLUMNS)
    sidecar = tmp_path / "scores.provenance.json"
    assert json.loads(sidecar.read_text()) == record
    assert export.table_bytes(tidy, "csv", provenance=record) == target.read_bytes()


def test_xlsx_has_scores_wide_and_provenance_sheets(tidy: pd.DataFrame, record: dict, tmp_path: Path) -> None:
    target = tmp_path / "scores.xlsx"
    export.write_table(tidy, target, provenance=record)
    sheets = pd.read_excel(target, sheet_name=None)
    assert {"scores", "wide", "provenance"} <= set(sheets)
    # an empty level is an empty cell, which pandas reads as NaN
    scores = sheets["scores"].astype({"units": str}).fillna({"level": ""})
    sheets["wide"] = sheets["wide"].fillna({"level": ""})
    # openpyxl writes numbers with 16 significant digits ("%.16g"), one short of the 17 that
    # always round-trip a double (IEEE 754-2008, sec. 5.12.2): equal to 1e-15 relative,
    # finer than the 15 digits Excel itself computes with.
    exact_enough = {"check_exact": False, "rtol": 1e-15, "atol": 0.0, "check_dtype": False}
    pd.testing.assert_frame_equal(scores, tidy, **exact_enough)
    pd.testing.assert_frame_equal(sheets["wide"], export.wide_table(tidy), **exact_enough)
    prov = dict(zip(sheets["provenance"]["key"], sheets["provenance"]["value"].astype(str), strict=True))
    assert prov["variable"] == "tas" and prov["regrid"] == "conservative" and prov["reference"] == "ref_obs"
    assert prov["created"] == record["created"]
    assert str(record["inputs"][0]["path"]) in prov.values()


def test_xlsx_keeps_formula_like_names_as_text(tidy: pd.DataFrame, record: dict) -> None:
    # a name starting with "=" would otherwise become a live formula (OWASP, "CSV injection")
    risky = tidy.assign(model=tidy["model"].replace({"run_a": "=1+1"}))
    data = export.table_bytes(risky, "xlsx", provenance=record)
    scores = pd.read_excel(io.BytesIO(data), sheet_name="scores")
    assert set(scores["model"]) == {"=1+1", "run_b"}


def test_json_holds_provenance_and_full_precision_records(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    target = tmp_path / "scores.json"
    export.write_table(tidy, target, provenance=record)
    text = target.read_text(encoding="utf-8")
    assert "NaN" not in text  # RFC 8259 has no NaN: missing values must be null
    data = json.loads(text)
    assert data["provenance"] == record
    back = pd.DataFrame(data["scores"]).astype({"value": float})
    pd.testing.assert_frame_equal(back, tidy, check_exact=True, check_dtype=False)


def markdown_rows(text: str) -> list[list[str]]:
    return [[c.strip() for c in line.strip().strip("|").split("|")] for line in text.splitlines()]


def test_markdown_shows_the_wide_table_then_the_provenance(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    target = tmp_path / "scores.md"
    export.write_table(tidy, target, provenance=record)
    text = target.read_text(encoding="utf-8")
    table_text, _, after = text.partition("## Units")
    lines = [line for line in table_text.splitlines() if line.startswith("|")]
    header, rule, *body = markdown_rows("\n".join(lines))
    # reference, variable and period hold one value: said once above the table
    assert header == ["model", "level", "region", "season"] + CONTRACT_METRICS
    assert "For every row: reference ref_obs; variable tas; period 1991-2020." in table_text
    assert all(set(cell) <= set(":-") for cell in rule)  # GitHub-flavoured pipe-table rule
    assert len(body) == 8
    for cells in body:
        row = pd.Series(dict(zip(header, [html.unescape(c) for c in cells], strict=True)))
        for metric in CONTRACT_METRICS:
            assert close_to_shown(row[metric], lookup(tidy, row, metric), metric), (metric, row[metric])
    for number, metric in enumerate(CONTRACT_METRICS, start=4):
        assert len(shown_decimals([cells[number] for cells in body])) <= 1, metric  # one precision per column
    provenance_text = after.partition("## Provenance")[2]
    assert record["created"] in provenance_text
    assert record["inputs"][0]["path"] in provenance_text
    # the note's line break must not break the pipe table
    assert all(line.startswith("|") for line in provenance_text.strip().splitlines())
    assert "K/decade" in after


def test_latex_is_an_escaped_booktabs_tabular_with_provenance_comments(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    target = tmp_path / "scores.tex"
    export.write_table(tidy, target, provenance=record)
    lines = target.read_text(encoding="utf-8").splitlines()
    table = lines.index("\\begin{table}")
    assert all(line.startswith("%") for line in lines[:table])  # provenance only as comments
    comments = "\n".join(lines[:table])
    assert record["created"] in comments and "line one line two" in comments
    # a float with a caption naming the columns that hold one value (LaTeX's table environment)
    assert lines[table + 1] == "\\centering"
    # (a table taller than a page comes in parts, each a float: "(part 1 of 2)")
    assert re.fullmatch(r"\\caption\{Scores: reference ref\\_obs; variable tas; period 1991-2020( \(part 1 of \d\))?\}", lines[table + 2])
    assert lines[-1] == "\\end{table}"
    # the metric columns in blocks that fit the page, each repeating the key columns
    keys = ["model", "level", "region", "season"]
    starts = [i for i, line in enumerate(lines) if line.startswith("\\begin{tabular}")]
    assert len(starts) >= 2
    seen: list[str] = []
    for start in starts:
        body = lines[start: lines.index("\\end{tabular}", start) + 1]
        assert body[1] == "\\toprule" and body[-2] == "\\bottomrule" and body[-1] == "\\end{tabular}"
        mid = body.index("\\midrule")
        rows = body[mid + 1 : -2]
        assert len(rows) == 8
        columns = [c.strip().replace("\\_", "_") for c in body[2].removesuffix("\\\\").split("&")]
        assert columns[:4] == keys
        seen += columns[4:]
        for line in body[2:mid] + rows:
            assert line.endswith("\\\\") and line.count("&") == len(columns) - 1
            # LaTeX special characters (Lamport, "LaTeX", 2nd ed., sec. 2.2.1) only escaped
            assert not re.search(r"(?<!\\)[_%&#$]", line.replace(" & ", " ").removesuffix("\\\\"))
        assert "run\\_a" in rows[0]
        for line in rows:
            cells = [c.strip().replace("\\_", "_") for c in line.removesuffix("\\\\").split("&")]
            row = pd.Series(dict(zip(columns, cells, strict=True)))
            for metric in columns[4:]:
                if metric in CONTRACT_METRICS:
                    assert close_to_shown(row[metric], lookup(tidy, row, metric), metric)
    assert [m for m in seen if m in CONTRACT_METRICS] == CONTRACT_METRICS  # every metric once, in order


class _Tables(html.parser.HTMLParser):
    """Cell texts of every <table> (pandas.read_html would need lxml or bs4)."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[list[list[str]]] = []
        self.cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list) -> None:
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in {"td", "th"}:
            self.cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag in {"td", "th"} and self.cell is not None:
            self.tables[-1][-1].append("".join(self.cell).strip())
            self.cell = None

    def handle_data(self, data: str) -> None:
        if self.cell is not None:
            self.cell.append(data)


def test_html_is_a_standalone_page_with_table_and_provenance(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    target = tmp_path / "scores.html"
    export.write_table(tidy, target, provenance=record)
    text = target.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html>") and text.rstrip().endswith("</html>")
    parser = _Tables()
    parser.feed(text)
    scores, units, prov = parser.tables
    header, *body = scores
    assert header == KEYS + CONTRACT_METRICS and len(body) == 8
    for cells in body:
        row = pd.Series(dict(zip(header, cells, strict=True)))
        for metric in CONTRACT_METRICS:
            assert close_to_shown(row[metric], lookup(tidy, row, metric), metric)
    assert units[0][0] == "variable" and units[1][0] == "tas"
    pairs = dict(prov[1:])
    assert pairs["created"] == record["created"] and pairs["reference"] == "ref_obs"


def test_html_escapes_names(tidy: pd.DataFrame, record: dict) -> None:
    hostile = "<script>alert(1)</script>&run"
    text = export.table_bytes(
        tidy.assign(model=tidy["model"].replace({"run_a": hostile})),
        "html",
        provenance={**record, "notes": "<b>bold</b>"},
    ).decode()
    assert "<script>" not in text and "<b>" not in text
    parser = _Tables()
    parser.feed(text)
    assert hostile in {row[0] for row in parser.tables[0][1:]}
    assert ["notes", "<b>bold</b>"] in parser.tables[2]


@pytest.mark.parametrize("fmt", export.TABLE_FORMATS)
def test_bytes_match_the_written_file(tidy: pd.DataFrame, record: dict, tmp_path: Path, fmt: str) -> None:
    target = tmp_path / f"scores.{fmt}"
    export.write_table(tidy, target, provenance=record)
    if fmt != "xlsx":  # a workbook stores the time it was written
        assert target.read_bytes() == export.table_bytes(tidy, fmt, provenance=record)
    assert oct(target.stat().st_mode & 0o777) == oct(0o644)  # not mkstemp's owner-only mode


@pytest.mark.parametrize("fmt", export.TABLE_FORMATS)
def test_an_empty_table_still_exports(record: dict, fmt: str) -> None:
    empty = pd.DataFrame({c: pd.Series(dtype=float if c == "value" else object) for c in CONTRACT_COLUMNS})
    data = export.table_bytes(empty, fmt, provenance=record)
    if fmt == "csv":
        assert data.decode().strip() == ",".join(CONTRACT_COLUMNS)
    elif fmt == "json":
        assert json.loads(data)["scores"] == []
    else:
        assert len(data) > 0


# -- bad input and atomic writes ----------------------------------------------------------


def test_unknown_extension_names_it_and_the_allowed_ones(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    with pytest.raises(InputError) as caught:
        export.write_table(tidy, tmp_path / "scores.txt", provenance=record)
    message = str(caught.value)
    assert ".txt" in message and all(f".{f}" in message for f in CONTRACT_FORMATS)
    assert "\n" not in message
    with pytest.raises(InputError, match="no extension"):
        export.write_table(tidy, tmp_path / "scores", provenance=record)
    with pytest.raises(InputError, match=r"\.pdf"):
        export.table_bytes(tidy, "pdf", provenance=record)
    assert list(tmp_path.iterdir()) == []


def test_a_table_without_the_contract_columns_is_refused_before_writing(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    with pytest.raises(InputError, match="units"):
        export.write_table(tidy.drop(columns="units"), tmp_path / "scores.csv", provenance=record)
    assert list(tmp_path.iterdir()) == []


def test_a_missing_or_non_folder_directory_is_input_error(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    with pytest.raises(InputError, match="does not exist") as caught:
        export.write_table(tidy, tmp_path / "nowhere" / "scores.md", provenance=record)
    assert caught.value.file == str(tmp_path / "nowhere") and caught.value.remedy
    (tmp_path / "plain").write_text("a file, not a folder")
    with pytest.raises(InputError, match="not a folder"):
        export.write_field(
            xr.DataArray([1.0], dims="x", name="v"), tmp_path / "plain" / "f.nc", provenance=record
        )


def _disk_full(fd: int) -> None:
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.mark.parametrize("name", ["scores.csv", "scores.xlsx", "scores.html"])
def test_a_failing_disk_leaves_no_file_and_the_old_one_intact(
    tidy: pd.DataFrame, record: dict, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, name: str
) -> None:
    # os.fsync is the last step before the rename: simulating ENOSPC there means the data
    # were already (partly) in the temporary file, as with a real full disk.
    target = tmp_path / name
    monkeypatch.setattr(os, "fsync", _disk_full)
    with pytest.raises(InputError, match="No space left") as caught:
        export.write_table(tidy, target, provenance=record)
    assert caught.value.file == str(target)
    assert list(tmp_path.iterdir()) == []  # neither target, sidecar nor temporary file

    monkeypatch.undo()
    target.write_bytes(b"previous report")
    monkeypatch.setattr(os, "fsync", _disk_full)
    with pytest.raises(InputError):
        export.write_table(tidy, target, provenance=record)
    assert target.read_bytes() == b"previous report"
    assert [p.name for p in tmp_path.iterdir()] == [name]


def test_a_field_that_fails_while_computing_leaves_no_file(record: dict, tmp_path: Path) -> None:
    def unreadable(block: np.ndarray, block_info: dict | None = None) -> np.ndarray:
        if block_info is not None and block_info[None]["chunk-location"][0] == 1:
            raise ValueError("source file went away while reading")
        return block

    lazy = dask.array.ones((4, 3), chunks=(2, 3)).map_blocks(unreadable, dtype=float)
    field = xr.DataArray(lazy, dims=("time", "lat"), name="tas")
    with pytest.raises(ValueError, match="went away"):
        export.write_field(field, tmp_path / "tas.nc", provenance=record)
    assert list(tmp_path.iterdir()) == []


# -- NetCDF fields ----------------------------------------------------------------------


def field_360_day(*, lazy: bool) -> xr.DataArray:
    # dates built with cftime itself, the outside reference for the 360-day calendar
    times = [cftime.Datetime360Day(1991 + i // 12, i % 12 + 1, 16) for i in range(24)]
    values = np.arange(24 * 3 * 4, dtype="float32").reshape(24, 3, 4)
    values[5, 1, 2] = np.nan
    da = xr.DataArray(
        values,
        dims=("time", "lat", "lon"),
        coords={
            "time": ("time", times, {"standard_name": "time"}),
            "lat": ("lat", [-30.0, 0.0, 30.0], {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": (
                "lon",
                [-135.0, -45.0, 45.0, 135.0],
                {"units": "degrees_east", "standard_name": "longitude"},
            ),
        },
        name="tas_difference",
        attrs={
            "units": "K",
            "standard_name": "air_temperature",
            "long_name": "near-surface air temperature, run_a minus ref_obs",
            "cell_methods": "time: mean area: mean",
            "masked": True,
            "note": None,
        },
    )
    return da.chunk({"time": 12}) if lazy else da


@pytest.mark.parametrize("lazy", [False, True], ids=["numpy", "dask"])
def test_write_field_round_trips_with_a_360_day_calendar(record: dict, tmp_path: Path, lazy: bool) -> None:
    field = field_360_day(lazy=lazy)
    before = (dict(field.attrs), dict(field.encoding), dict(field["time"].encoding))
    target = tmp_path / "difference.nc"
    export.write_field(field, target, provenance=record)

    with xr.open_dataset(target, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as ds:
        back = ds["tas_difference"].load()
        attrs = dict(ds.attrs)
    expected_times = [cftime.Datetime360Day(1991 + i // 12, i % 12 + 1, 16) for i in range(24)]
    assert list(back["time"].values) == expected_times
    np.testing.assert_array_equal(back.values, field.values)  # NaN in the same place
    for key in ["units", "standard_name", "long_name", "cell_methods"]:
        assert back.attrs[key] == field.attrs[key]
    assert back["lat"].attrs["standard_name"] == "latitude"
    assert attrs["Conventions"] == "CF-1.10"
    assert json.loads(attrs["provenance"]) == record
    assert record["created"] in attrs["history"]

    # the raw encoding, decoded by cftime rather than xarray (CF-1.10 sec. 4.4)
    with netCDF4.Dataset(target) as nc:
        time = nc.variables["time"]
        assert time.calendar == "360_day"
        assert list(cftime.num2date(time[:], time.units, time.calendar)) == expected_times
        assert "_FillValue" not in nc.variables["lat"].ncattrs()  # CF 2.5.1: no missing coordinates
    assert (dict(field.attrs), dict(field.encoding), dict(field["time"].encoding)) == before


def test_write_field_keeps_dataset_history_and_refuses_other_extensions(record: dict, tmp_path: Path) -> None:
    ds = field_360_day(lazy=False).to_dataset().assign_attrs(history="2020-01-01: made by hand")
    target = tmp_path / "field.nc"
    export.write_field(ds, target, provenance=record)
    with xr.open_dataset(target, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as back:
        lines = back.attrs["history"].splitlines()
    assert lines[0] == "2020-01-01: made by hand" and record["created"] in lines[1]
    with pytest.raises(InputError, match=r"\.nc"):
        export.write_field(ds, tmp_path / "field.grib", provenance=record)
    assert [p.name for p in tmp_path.iterdir()] == ["field.nc"]


def test_field_bytes_are_a_netcdf4_file(record: dict, tmp_path: Path) -> None:
    field = field_360_day(lazy=False)
    data = export.field_bytes(field, provenance=record)
    # every NetCDF-4 file is an HDF5 file, which starts with this signature (HDF5 File
    # Format Specification, "Format Signature")
    assert data[:8] == b"\x89HDF\r\n\x1a\n"
    copy = tmp_path / "download.nc"
    copy.write_bytes(data)
    with xr.open_dataset(copy, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as ds:
        np.testing.assert_array_equal(ds["tas_difference"].values, field.values)
        assert ds["time"].encoding["calendar"] == "360_day"


# -- a map as the dashboard downloads it: CF coordinates and a climatological time axis --


def season_map(season: str, *, units: str = "K", name: str = "tas_difference") -> xr.DataArray:
    """A (lat, lon) field as a comparison gives it: no bounds, no time, season and period in attrs."""
    lat = np.arange(-87.5, 90.0, 5.0)
    lon = np.arange(-177.5, 180.0, 5.0)
    rng = np.random.default_rng(7)
    area = np.cos(np.deg2rad(lat))[:, None] * np.ones(lon.size)
    return xr.DataArray(
        rng.normal(size=(lat.size, lon.size)),
        dims=("lat", "lon"),
        coords={"lat": lat, "lon": lon, "cell_area": (("lat", "lon"), area, {"units": "m2", "long_name": "area of grid cell"})},
        name=name,
        attrs={"units": units, "long_name": "near-surface air temperature — run_a minus ref_obs", "season": season,
               "period": "1991-2020", "variable": "tas"},
    )


@pytest.mark.parametrize(
    ("season", "start", "end"),
    [
        # CF-1.10 section 7.4 (example 7.10, climatological seasons): the bounds run from the
        # start of the first season to the end of the last; DJF starts the December before.
        ("ANN", (1991, 1, 1), (2021, 1, 1)),
        ("DJF", (1990, 12, 1), (2020, 3, 1)),
        ("JJA", (1991, 6, 1), (2020, 9, 1)),
        ("DEC", (1991, 12, 1), (2021, 1, 1)),
    ],
)
def test_a_map_is_written_as_cf_and_passes_the_check(record: dict, tmp_path: Path, season: str, start: tuple, end: tuple) -> None:
    target = tmp_path / f"map_{season}.nc"
    export.write_field(season_map(season), target, provenance=record)
    with netCDF4.Dataset(target) as nc:
        # CF-1.10 sections 4.1 and 4.2: latitude/longitude recognised by standard_name, units, axis
        for name, standard, units, axis in (("lat", "latitude", "degrees_north", "Y"), ("lon", "longitude", "degrees_east", "X")):
            var = nc.variables[name]
            assert (var.standard_name, var.units, var.axis) == (standard, units, axis)
            # CF section 7.1: bounds (n, 2) that enclose each centre and tile the axis
            bounds = nc.variables[var.bounds][:]
            centres = var[:]
            assert bounds.shape == (centres.size, 2)
            assert np.all(bounds[:, 0] < centres) and np.all(centres < bounds[:, 1])
            np.testing.assert_array_equal(bounds[1:, 0], bounds[:-1, 1])
        lat_bounds = nc.variables["lat_bnds"][:]
        assert (lat_bounds[0, 0], lat_bounds[-1, 1]) == (-90.0, 90.0)
        data = nc.variables["tas_difference"]
        assert data.dimensions == ("time", "lat", "lon")
        assert data.cell_measures == "area: cell_area"  # CF section 7.2
        assert data.cell_methods == "time: mean within years time: mean over years"  # CF section 7.4
        time = nc.variables["time"]
        # the bounds decoded by cftime (outside reference), not by the code under test
        lo, hi = cftime.num2date(nc.variables[time.climatology][0], time.units, time.calendar)
        assert (lo.year, lo.month, lo.day) == start and (hi.year, hi.month, hi.day) == end
        middle = cftime.num2date(time[0], time.units, time.calendar)
        assert lo < middle < hi
    checked = subprocess.run([_gridscore(), "check", str(target)], capture_output=True, text=True, timeout=120)
    assert checked.returncode == 0, checked.stdout + checked.stderr


def test_a_trend_map_gets_units_udunits_reads_and_passes_the_check(record: dict, tmp_path: Path) -> None:
    target = tmp_path / "trend.nc"
    export.write_field(season_map("ANN", units="K/decade", name="tas_trend"), target, provenance=record)
    with netCDF4.Dataset(target) as nc:
        var = nc.variables["tas_trend"]
        # UDUNITS-2 grammar: a number times a unit in parentheses is a unit ("decade" is not one)
        assert var.units == "K/(10 year)"
        assert "cell_methods" not in var.ncattrs()  # CF names no method for a trend over years
    checked = subprocess.run([_gridscore(), "check", str(target)], capture_output=True, text=True, timeout=120)
    assert checked.returncode == 0, checked.stdout + checked.stderr


def _gridscore() -> str:
    """The console script of the environment running the tests."""
    import shutil
    import sys

    exe = Path(sys.executable).with_name("gridscore")
    return str(exe) if exe.exists() else (shutil.which("gridscore") or "gridscore")


def test_report_numbers_one_precision_per_column_p_values_floored_excel_formats_full_values(
    tidy: pd.DataFrame, record: dict, tmp_path: Path
) -> None:
    import openpyxl

    table = tidy[tidy["region"] == "global"].copy()
    table.loc[table["metric"] == "bias", "value"] = [283.14, 284.0, 283.96, 1.5]  # "284" beside "283.1" before
    table.loc[table["metric"] == "trend_pvalue", "value"] = [2e-7, 0.0004, 0.049, 0.5]
    export.write_table(table, tmp_path / "scores.md", provenance=record)
    text = (tmp_path / "scores.md").read_text(encoding="utf-8")
    lines = [line for line in text.partition("## Units")[0].splitlines() if line.startswith("|")]
    header, _, *body = markdown_rows("\n".join(lines))
    bias = [cells[header.index("bias")] for cells in body]
    pvalues = [html.unescape(cells[header.index("trend_pvalue")]) for cells in body]
    # four significant digits of the column's largest value, the same decimals for all
    assert bias == ["283.1", "284.0", "284.0", "1.5"]
    assert pvalues == ["< 0.001", "< 0.001", "0.049", "0.500"]

    export.write_table(table, tmp_path / "scores.xlsx", provenance=record)
    book = openpyxl.load_workbook(tmp_path / "scores.xlsx")
    wide = book["wide"]
    names = [c.value for c in wide[1]]
    column = names.index("bias") + 1
    cells = [wide.cell(row=r, column=column) for r in range(2, 2 + len(body))]
    assert {c.number_format for c in cells} == {"0.0"}
    # the cell keeps the value itself (Excel shows it rounded by the format only)
    assert [c.value for c in cells] == [283.14, 284.0, 283.96, 1.5]
    p_cells = [wide.cell(row=r, column=names.index("trend_pvalue") + 1) for r in range(2, 2 + len(body))]
    assert {c.number_format for c in p_cells} == {'[<0.001]"< 0.001";0.000'}  # Excel conditional format section
    assert p_cells[0].value == 2e-7
    tidy_sheet = book["scores"]
    formats = {tidy_sheet.cell(row=r, column=9).number_format for r in range(2, tidy_sheet.max_row + 1)}
    assert "General" not in formats


def test_an_ensemble_spread_row_gets_decimals_of_its_own(tidy: pd.DataFrame, record: dict, tmp_path: Path) -> None:
    # A members' standard deviation of 0.008 K beside means of 283 K must not read "0.0":
    # four significant digits of its own magnitude (the rule of number_style, common practice
    # for reporting a spread with the precision of the spread, not of the mean)
    table = tidy[tidy["region"] == "global"].copy()
    last = sorted(table["model"].unique())[-1]
    table.loc[table["model"] == last, "model"] = "fennel (members' std)"
    is_bias = table["metric"] == "bias"
    is_spread = table["model"] == "fennel (members' std)"
    table.loc[is_bias & ~is_spread, "value"] = 283.14
    table.loc[is_bias & is_spread, "value"] = 0.008
    export.write_table(table, tmp_path / "scores.md", provenance=record)
    text = (tmp_path / "scores.md").read_text(encoding="utf-8")
    lines = [line for line in text.partition("## Units")[0].splitlines() if line.startswith("|")]
    header, _, *body = markdown_rows("\n".join(lines))
    shown = [(html.unescape(cells[header.index("model")]), cells[header.index("bias")]) for cells in body]
    assert {v for k, v in shown if k == "fennel (members' std)"} == {"0.008000"}
    assert {v for k, v in shown if k != "fennel (members' std)"} == {"283.1"}
