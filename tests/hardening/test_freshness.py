"""A served result is never older than its files.

The dashboard's shared :class:`~app.views.results.Results` (what every session of a
running server asks) and the on-disk cache are checked while files are replaced by ones
5 K warmer -- also with equal size and the old modification time put back, as ``cp``
followed by ``touch -d`` leaves them -- truncated, repaired, deleted and touched.
The expected shifts follow from the construction of the files: adding 5 K to every value
moves the bias by exactly 5 K (the bias is a weighted mean of differences; common
practice).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
from cfdata import write_cf

from app.views.results import Results
from evaluation.catalog import Collection
from evaluation.scoring import Source, score_table

GRID = {"dlat": 15.0, "years": 2, "start_year": 2001}


def _write(path: Path, offset: float) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    return write_cf(path, offset=offset, **GRID)


def _replace_keeping_size_and_time(target: Path, offset: float, scratch: Path) -> None:
    """``cp new target`` then ``touch -d <old time> target``: equal size, old mtime."""
    st = target.stat()
    new = _write(scratch / "new.nc", offset)
    assert new.stat().st_size == st.st_size
    shutil.copyfile(new, target)
    os.utime(target, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert target.stat().st_mtime_ns == st.st_mtime_ns and target.stat().st_size == st.st_size


@pytest.fixture
def collection(tmp_path: Path) -> Path:
    _write(tmp_path / "c" / "references" / "ref" / "tas.nc", 0.0)
    _write(tmp_path / "c" / "runs" / "a" / "tas.nc", 1.0)
    _write(tmp_path / "c" / "runs" / "b" / "tas.nc", 2.0)
    return tmp_path / "c"


def _bias(results: Results, run: str) -> float:
    results.revalidate()  # what every view does before it asks
    args = ("ref", "tas", "2001-2002", "global", "ANN")
    table = results.product(("scores", *args), results.scores, *args)
    return float(table.query(f"model == '{run}' and metric == 'bias'")["value"].item())


def test_a_replaced_file_of_equal_size_and_old_time_is_seen(collection: Path, tmp_path: Path) -> None:
    results = Results(Collection.from_path(collection))
    assert _bias(results, "a") == pytest.approx(1.0, abs=1e-4)
    _replace_keeping_size_and_time(collection / "runs" / "a" / "tas.nc", 6.0, tmp_path)
    assert _bias(results, "a") == pytest.approx(6.0, abs=1e-4)
    assert _bias(results, "b") == pytest.approx(2.0, abs=1e-4)
    results.close()


def test_a_truncated_file_is_retried_once_repaired(collection: Path, tmp_path: Path) -> None:
    target = collection / "runs" / "b" / "tas.nc"
    good = target.read_bytes()
    target.write_bytes(good[: len(good) // 2])
    results = Results(Collection.from_path(collection))
    left = results.left_out("ref", "tas")
    assert any(line.startswith("b: ") and "truncated" in line for line in left), left
    assert "b" not in results.models("tas")
    target.write_bytes(good)  # repaired
    assert results.revalidate()
    assert "b" in results.models("tas")
    assert results.left_out("ref", "tas") == ()
    assert _bias(results, "b") == pytest.approx(2.0, abs=1e-4)
    results.close()


def test_a_deleted_run_is_left_out_not_a_crash(collection: Path) -> None:
    results = Results(Collection.from_path(collection))
    assert _bias(results, "b") == pytest.approx(2.0, abs=1e-4)
    (collection / "runs" / "b" / "tas.nc").unlink()
    assert results.revalidate()
    assert "b" not in results.models("tas")
    assert any(line.startswith("b: ") for line in results.left_out("ref", "tas"))
    assert _bias(results, "a") == pytest.approx(1.0, abs=1e-4)
    results.close()


def test_a_touched_file_starts_a_new_generation_with_the_same_numbers(collection: Path) -> None:
    results = Results(Collection.from_path(collection))
    before = _bias(results, "a")
    assert not results.revalidate()  # nothing changed: nothing recomputed
    os.utime(collection / "runs" / "a" / "tas.nc")
    assert results.revalidate()
    assert _bias(results, "a") == pytest.approx(before, abs=1e-12)
    results.close()


def test_the_disk_cache_does_not_serve_a_replaced_file(collection: Path, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setenv("GRIDSCORE_CACHE", str(tmp_path / "cache"))
    ref = Source("ref", "reference", (str(collection / "references" / "ref" / "tas.nc"),))
    run = Source("a", "model", (str(collection / "runs" / "a" / "tas.nc"),))

    def bias() -> float:
        table, _ = score_table(reference=ref, models=[run], variable="tas")
        return float(table.query("metric == 'bias'")["value"].item())

    assert bias() == pytest.approx(1.0, abs=1e-4)
    _replace_keeping_size_and_time(collection / "runs" / "a" / "tas.nc", 6.0, tmp_path)
    assert bias() == pytest.approx(6.0, abs=1e-4)


def test_a_same_size_rewrite_in_place_changes_the_identity(collection: Path, tmp_path: Path) -> None:
    from evaluation.io import file_identity

    target = collection / "runs" / "a" / "tas.nc"
    before = file_identity([str(target)])[0]
    _replace_keeping_size_and_time(target, 1.5, tmp_path)
    after = file_identity([str(target)])[0]
    assert (after.size, after.modified) == (before.size, before.modified)
    assert after != before and after.sample != before.sample


def test_sessions_share_one_look_at_the_files_off_the_event_loop(collection: Path, tmp_path: Path, monkeypatch) -> None:
    import asyncio
    import threading

    import app.views.results as module

    results = Results(Collection.from_path(collection))
    looks: list[str] = []
    stamp = results._inputs_stamp
    monkeypatch.setattr(results, "_inputs_stamp", lambda: looks.append(threading.current_thread().name) or stamp())

    async def sessions(n: int) -> list[int]:
        return await asyncio.gather(*(results.fresh() for _ in range(n)))

    assert asyncio.run(sessions(10)) == [0] * 10
    assert len(looks) == 1 and looks[0].startswith("gridscore-watch")  # one look, not on the loop's thread
    assert asyncio.run(sessions(10)) == [0] * 10 and len(looks) == 1  # within LOOK_SECONDS: the same look
    monkeypatch.setattr(module, "LOOK_SECONDS", 0.0)
    _replace_keeping_size_and_time(collection / "runs" / "a" / "tas.nc", 6.0, tmp_path)
    assert asyncio.run(sessions(3)) == [1] * 3  # one new generation, seen by every session
    assert results.changed_at is not None
    args = ("ref", "tas", "2001-2002", "global", "ANN")
    table = results.product(("scores", *args), results.scores, *args)
    assert float(table.query("model == 'a' and metric == 'bias'")["value"].item()) == pytest.approx(6.0, abs=1e-4)
    results.close()


def test_a_large_file_rewritten_at_equal_size_and_old_time_changes_its_sample(tmp_path: Path) -> None:
    """Above the size hashed whole, the content sample is its head, tail and raw blocks at
    fixed offsets: new values at equal size and the old modification time still change it,
    a touch that keeps the bytes does not (common practice: an identity of the content)."""
    from evaluation import request

    big = {"dlat": 2.0, "years": 10, "start_year": 2001}
    target = write_cf(tmp_path / "big.nc", offset=0.0, **big)
    st = target.stat()
    assert st.st_size > request._SAMPLE_WHOLE  # the sampled path, not the whole-file hash
    before = request._content_sample(str(target), st.st_size)
    new = write_cf(tmp_path / "new.nc", offset=5.0, **big)
    assert new.stat().st_size == st.st_size
    shutil.copyfile(new, target)
    os.utime(target, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert request._content_sample(str(target), st.st_size) != before
    shutil.copyfile(tmp_path / "new.nc", tmp_path / "same.nc")
    os.utime(tmp_path / "same.nc", ns=(1, 1))
    assert request._content_sample(str(tmp_path / "same.nc"), st.st_size) == request._content_sample(str(new), st.st_size)


def test_a_file_up_to_4_mib_with_one_byte_changed_changes_its_sample(tmp_path: Path) -> None:
    """A file of up to 4 MiB is hashed whole: one byte changed anywhere, at equal size and
    the old modification time, changes its sample (common practice: an identity of the
    content; a sampled hash would miss a byte between its blocks)."""
    from evaluation import request

    path = tmp_path / "small.bin"
    size = request._SAMPLE_WHOLE
    data = bytearray(os.urandom(size))
    path.write_bytes(bytes(data))
    st = path.stat()
    before = request._content_sample(str(path), size)
    for where in (size // 2 + 12_345, size - 70_000, 1_000_001):
        data[where] ^= 0xFF
        path.write_bytes(bytes(data))
        os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
        after = request._content_sample(str(path), size)
        assert after != before, where
        before = after
