"""The cache owns only what it made: clear and eviction never touch other files, a folder
holding foreign files is refused, a damaged or edited entry is recomputed, and bad size
settings are refused with one line (exit 2)."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from cfdata import write_cf

from evaluation.cache import INDEX, MARKER, Cache
from evaluation.errors import InputError
from evaluation.scoring import Comparison, Source

from .cli import run


@pytest.fixture
def data_folder(tmp_path: Path) -> Path:
    """A person's data folder: NetCDF inputs, a JSON note, a sub-folder."""
    folder = tmp_path / "data"
    folder.mkdir()
    write_cf(folder / "ref.nc", dlat=15.0, years=2, start_year=2001)
    write_cf(folder / "run.nc", dlat=15.0, years=2, start_year=2001, offset=1.0)
    (folder / "notes.json").write_text('{"mine": true}')
    (folder / "sub").mkdir()
    return folder


def _contents(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _score(capsys, folder: Path, *extra: str):
    return run(capsys, "score", "--reference", f"ref={folder / 'ref.nc'}", "--model", f"run={folder / 'run.nc'}", "--variable", "tas", *extra)


def test_clear_refuses_a_data_folder_and_deletes_nothing(capsys, data_folder: Path) -> None:
    before = _contents(data_folder)
    outcome = run(capsys, "cache", "clear", "--cache-dir", str(data_folder))
    assert outcome.one_line_refusal(), outcome
    assert "did not make" in outcome.err
    assert _contents(data_folder) == before


def test_info_refuses_a_data_folder(capsys, data_folder: Path) -> None:
    assert run(capsys, "cache", "info", "--cache-dir", str(data_folder)).one_line_refusal()


def test_a_small_bound_on_a_data_folder_deletes_no_input(capsys, data_folder: Path, monkeypatch) -> None:
    before = _contents(data_folder)
    monkeypatch.setenv("GRIDSCORE_CACHE", str(data_folder))
    monkeypatch.setenv("GRIDSCORE_CACHE_LIMIT_MB", "0.000001")
    outcome = _score(capsys, data_folder)
    assert outcome.one_line_refusal(), outcome
    assert _contents(data_folder) == before


def test_eviction_in_its_own_folder_removes_only_entries(capsys, data_folder: Path, tmp_path: Path, monkeypatch) -> None:
    cache = tmp_path / "cache"
    monkeypatch.setenv("GRIDSCORE_CACHE", str(cache))
    monkeypatch.setenv("GRIDSCORE_CACHE_LIMIT_MB", "0.000001")  # smaller than any entry
    assert _score(capsys, data_folder).code == 0
    names = sorted(p.name for p in cache.iterdir())
    assert MARKER in names and INDEX in names
    assert not [n for n in names if n.startswith("gs-")]  # everything it stored was evicted
    assert (cache / MARKER).read_text().startswith("Signature: 8a477f597d28d172789f06886806bc55")  # CACHEDIR.TAG spec


def test_background_writes_are_done_and_evicted_when_the_command_returns(capsys, data_folder: Path, tmp_path: Path, monkeypatch) -> None:
    """The race behind an entry left above the bound: the command returned while the
    background writer still held season means; a slowed writer makes it certain."""
    import threading
    import time

    import evaluation.cache as cache_module

    original = cache_module._write_classic
    background = []

    def slow_write(da, path):
        if threading.current_thread().name.startswith("gridscore-cache-writer"):
            background.append(path)
            time.sleep(0.3)
        original(da, path)

    monkeypatch.setattr(cache_module, "_write_classic", slow_write)
    cache = tmp_path / "cache"
    monkeypatch.setenv("GRIDSCORE_CACHE", str(cache))
    monkeypatch.setenv("GRIDSCORE_CACHE_LIMIT_MB", "0.000001")  # smaller than any entry
    assert _score(capsys, data_folder).code == 0
    assert background  # the season means went through the background writer
    # common practice (a size bound): nothing stored or half-written above it once the command is done
    assert not [p.name for p in cache.iterdir() if p.name.startswith(("gs-", ".gs-tmp-"))]
    assert Cache(cache)._read_index() == {}


def test_a_foreign_file_in_the_cache_folder_is_refused(capsys, tmp_path: Path) -> None:
    cache = Cache(tmp_path / "cache")
    cache.put_json("0" * 32, {"a": 1})
    (tmp_path / "cache" / "precious.nc").write_bytes(b"mine")
    outcome = run(capsys, "cache", "clear", "--cache-dir", str(tmp_path / "cache"))
    assert outcome.one_line_refusal() and "precious.nc" in outcome.err
    assert (tmp_path / "cache" / "precious.nc").read_bytes() == b"mine"
    assert (tmp_path / "cache" / f"gs-{'0' * 32}.json").is_file()


def test_clear_removes_entries_and_leaves_the_marker(capsys, tmp_path: Path) -> None:
    cache = Cache(tmp_path / "cache")
    for i in range(3):
        cache.put(f"{i:032x}", xr.DataArray(np.arange(5.0) + i, dims="x", name="v"))
    outcome = run(capsys, "cache", "clear", "--cache-dir", str(tmp_path / "cache"))
    assert outcome.code == 0 and "removed 3 entries" in outcome.out
    assert sorted(p.name for p in (tmp_path / "cache").iterdir() if not p.name.startswith(".")) == [MARKER, INDEX]


def test_an_unlisted_file_is_never_served(tmp_path: Path) -> None:
    cache = Cache(tmp_path / "cache")
    cache.put_json("a" * 32, {"v": 1})
    # a file of the entries' form that the index does not list (copied in by hand)
    (tmp_path / "cache" / f"gs-{'b' * 32}.json").write_text('{"v": 2}')
    assert cache.get_json("b" * 32) is None
    assert cache.get_json("a" * 32) == {"v": 1}


@pytest.mark.parametrize("edit", ["flip", "truncate", "replace"])
def test_an_edited_entry_is_detected_and_dropped(tmp_path: Path, edit: str) -> None:
    cache = Cache(tmp_path / "cache")
    key = "c" * 32
    cache.put(key, xr.DataArray(np.arange(100.0), dims="x", name="v"))
    f = tmp_path / "cache" / f"gs-{key}.nc"
    data = bytearray(f.read_bytes())
    if edit == "flip":
        data[-200] ^= 0xFF
    elif edit == "truncate":
        data = data[: len(data) // 2]
    else:  # a valid NetCDF file with other numbers, same name
        other = tmp_path / "other.nc"
        xr.DataArray(np.arange(100.0) * 2, dims="x", name="v").to_netcdf(other)
        data = bytearray(other.read_bytes())
    f.write_bytes(bytes(data))
    assert cache.get(key) is None
    assert not f.exists()


def test_an_edited_reduction_is_recomputed_not_served(tmp_path: Path) -> None:
    ref = Source("ref", "reference", (str(write_cf(tmp_path / "ref.nc", dlat=15.0, years=2, start_year=2001)),))
    model = Source("run", "model", (str(write_cf(tmp_path / "run.nc", dlat=15.0, years=2, start_year=2001, offset=1.0)),))
    cache = Cache(tmp_path / "cache")

    def scores(store) -> pd.DataFrame:
        return Comparison(reference=ref, models=[model], variable="tas", cache=store).scores()

    truth = scores(False)
    scores(cache)
    for f in cache.entries():  # add 5 K to every stored reduction, keeping the file valid
        da = xr.load_dataarray(f)
        (da + 5.0).assign_attrs(da.attrs).to_netcdf(f)
    pd.testing.assert_frame_equal(scores(cache), truth)


@pytest.mark.parametrize("value", ["abc", "-5", "0", "nan", "inf", "1e400", "", " "])
def test_a_bad_cache_bound_is_one_line(capsys, tmp_path: Path, monkeypatch, value: str) -> None:
    monkeypatch.setenv("GRIDSCORE_CACHE_LIMIT_MB", value)
    outcome = run(capsys, "cache", "info", "--cache-dir", str(tmp_path / "c"))
    if value.strip():
        assert outcome.one_line_refusal(), outcome
        assert "GRIDSCORE_CACHE_LIMIT_MB" in outcome.err
    else:  # unset or blank: the default bound
        assert outcome.code == 0


@pytest.mark.parametrize("value", ["abc", "-1", "0", "nan", "inf"])
def test_a_bad_chunk_size_is_one_line(capsys, data_folder: Path, monkeypatch, value: str) -> None:
    monkeypatch.setenv("GRIDSCORE_CHUNK_MB", value)
    monkeypatch.setenv("GRIDSCORE_CACHE", "off")
    outcome = _score(capsys, data_folder)
    assert outcome.one_line_refusal(), outcome
    assert "GRIDSCORE_CHUNK_MB" in outcome.err


def test_a_file_where_the_cache_folder_should_be(tmp_path: Path) -> None:
    (tmp_path / "f").write_text("x")
    with pytest.raises(InputError):
        Cache(tmp_path / "f")


def test_an_empty_existing_folder_is_taken(tmp_path: Path) -> None:
    (tmp_path / "empty").mkdir()
    cache = Cache(tmp_path / "empty")
    cache.put_json("d" * 32, [1])
    assert cache.get_json("d" * 32) == [1]
    assert os.path.isfile(tmp_path / "empty" / MARKER)
