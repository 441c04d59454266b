"""Collections from TOML manifests and from the folder layout.

The files are real NetCDF files on disk: the generator's tiny demo collection.  Manifests
are parsed by :mod:`tomllib` (the standard library's TOML reader); every bad manifest must
give one :class:`InputError` line naming the file, the problem and a remedy.
"""

from __future__ import annotations

import os
import shutil
import tomllib
from pathlib import Path

import pytest

from evaluation.catalog import Collection
from evaluation.demo import write_demo
from evaluation.errors import InputError
from evaluation.scoring import Source


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The folder of a tiny demo collection (with its manifest.toml)."""
    return write_demo(tmp_path_factory.mktemp("catalog") / "demo", size="tiny", years=3).parent


def write_manifest(folder: Path, text: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "manifest.toml"
    path.write_text(text, encoding="utf-8")
    return path


def two_sources(demo: Path, *, reference: str = "halyard-rean", model: str = "larkspur-2") -> str:
    return f'''
title = "pair"
description = "one of each"

[[source]]
name = "{reference}"
role = "reference"
paths = ["{demo}/references/{reference}/*.nc"]

[[source]]
name = "{model}"
role = "model"
paths = ["{demo}/runs/{model}/*.nc"]
colour = "#123456"
description = "the run"
'''


def test_demo_manifest_file_and_folder_give_the_same_collection(demo: Path) -> None:
    by_file = Collection.from_path(demo / "manifest.toml")
    by_folder = Collection.from_path(demo)
    assert by_file == by_folder
    table = tomllib.loads((demo / "manifest.toml").read_text(encoding="utf-8"))
    assert by_file.title == table["title"] and by_file.description == table["description"]
    assert [s.name for s in by_file.sources] == [s["name"] for s in table["source"]]
    assert by_file.root == demo.resolve()
    assert [s.name for s in by_file.references] == ["tessera-obs", "halyard-rean"]
    assert [s.name for s in by_file.models] == ["larkspur-2", "pumice-ctl", "tidewell-3", "cobble-b"]
    assert all(isinstance(s, Source) for s in by_file.sources)
    assert all(os.path.isabs(p) for s in by_file.sources for p in s.paths)


def test_demo_variables_are_the_shared_time_varying_ones(demo: Path) -> None:
    # the scenario: the references hold all seven variables between them (ta on pressure
    # levels), every one is also in some run; the land fraction sftlf is a fixed field and
    # is not compared
    assert Collection.from_path(demo).variables() == ["pr", "psl", "rlut", "rsdt", "rsut", "ta", "tas"]


def test_variables_need_a_model_and_a_reference(demo: Path, tmp_path: Path) -> None:
    manifest = write_manifest(tmp_path / "pair", two_sources(demo))  # halyard-rean holds tas only
    assert Collection.from_path(manifest).variables() == ["tas"]
    manifest = write_manifest(
        tmp_path / "other", two_sources(demo, reference="tessera-obs", model="tidewell-3")
    )
    assert Collection.from_path(manifest).variables() == ["pr", "psl", "tas"]


def test_variables_are_kept_on_the_instance(demo: Path, tmp_path: Path) -> None:
    copy = tmp_path / "copy"
    shutil.copytree(demo, copy)
    collection = Collection.from_path(copy)
    first = collection.variables()
    shutil.rmtree(copy / "runs")
    assert collection.variables() == first


def test_paths_are_relative_to_the_manifest_folder(
    demo: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.chdir(tmp_path)
    collection = Collection.from_path(demo / "manifest.toml")
    src = collection.source("larkspur-2")
    assert src.paths == (str(demo.resolve() / "runs" / "larkspur-2" / "*.nc"),)
    assert src.colour == "#1f77b4" and src.role == "model" and src.description


def test_optional_fields_and_a_single_path_string(demo: Path, tmp_path: Path) -> None:
    text = f'''
[[source]]
name = "ref"
role = "reference"
paths = "{demo}/references/tessera-obs/tas_*.nc"
'''
    collection = Collection.from_path(write_manifest(tmp_path / "m", text))
    (src,) = collection.sources
    assert src.colour is None and src.description == "" and len(src.paths) == 1
    assert collection.title == "m" and collection.description == ""
    assert collection.models == () and collection.variables() == []


def test_folder_layout_without_manifest(demo: Path, tmp_path: Path) -> None:
    folder = tmp_path / "layout"
    shutil.copytree(demo / "references", folder / "references")
    shutil.copytree(demo / "runs", folder / "runs")
    collection = Collection.from_path(folder)
    assert collection.title == "layout"
    assert [s.name for s in collection.references] == ["halyard-rean", "tessera-obs"]  # sorted folders
    assert [s.name for s in collection.models] == ["cobble-b", "larkspur-2", "pumice-ctl", "tidewell-3"]
    assert collection.source("cobble-b").paths == (str(folder.resolve() / "runs" / "cobble-b" / "*.nc"),)
    assert collection.variables() == ["pr", "psl", "rlut", "rsdt", "rsut", "ta", "tas"]


def test_unknown_source_names_the_known_ones(demo: Path) -> None:
    with pytest.raises(InputError, match="no source called 'nope'.*tessera-obs, halyard-rean"):
        Collection.from_path(demo).source("nope")


BAD_MANIFESTS = {
    "syntax": ('title = "unclosed\n', "not valid TOML"),
    "unknown role": (
        '[[source]]\nname = "a"\nrole = "observation"\npaths = ["{ref}"]\n',
        "role 'observation'",
    ),
    "no paths": ('[[source]]\nname = "a"\nrole = "model"\n', "source 'a' has no paths"),
    "empty paths": ('[[source]]\nname = "a"\nrole = "model"\npaths = []\n', "source 'a' has no paths"),
    "duplicate": (
        '[[source]]\nname = "a"\nrole = "model"\npaths = ["{ref}"]\n'
        '[[source]]\nname = "a"\nrole = "reference"\npaths = ["{ref}"]\n',
        "two sources are called 'a'",
    ),
    "glob matches nothing": (
        '[[source]]\nname = "a"\nrole = "model"\npaths = ["runs/none/*.nc"]\n',
        "source 'a': the pattern matches no file",
    ),
    "missing file": (
        '[[source]]\nname = "a"\nrole = "model"\npaths = ["runs/absent.nc"]\n',
        "source 'a': file not found",
    ),
    "typo in a key": ('[[source]]\nname = "a"\nrole = "model"\npath = ["{ref}"]\n', "unknown key 'path'"),
    "typo at the top": ('titel = "x"\n', "unknown key 'titel'"),
    "bad colour": (
        '[[source]]\nname = "a"\nrole = "model"\npaths = ["{ref}"]\ncolour = "#12"\n',
        "colour '#12'",
    ),
    "no sources": ('title = "empty"\n', "names no source"),
    "no name": ('[[source]]\nrole = "model"\npaths = ["{ref}"]\n', "source #1 has no name"),
    "name not a string": ('[[source]]\nname = 3\nrole = "model"\npaths = ["{ref}"]\n', "must be a string"),
    "source not a table": ('source = "a"\n', "list of tables"),
    "reference_for on a run": ('[[source]]\nname = "a"\nrole = "model"\npaths = ["{ref}"]\nreference_for = ["tas"]\n', "model run but has reference_for"),
    "reference_for not names": ('[[source]]\nname = "a"\nrole = "reference"\npaths = ["{ref}"]\nreference_for = [1]\n', "not a list of variable names"),
}


def test_reference_for_orders_the_references_of_a_variable(demo: Path, tmp_path: Path) -> None:
    ref = demo / "references" / "tessera-obs" / "tas_*.nc"
    text = "".join(
        f'[[source]]\nname = "{name}"\nrole = "reference"\npaths = ["{ref}"]\n' + (f"reference_for = {marks}\n" if marks else "")
        for name, marks in [("plain", ""), ("for-pr", '["pr"]'), ("for-tas", '["tas", "pr"]'), ("also-tas", '"tas"')]
    )
    collection = Collection.from_path(write_manifest(tmp_path / "order", text))
    # marked ones first in manifest order, then unmarked ones; a reference marked for other variables only is not used
    assert [s.name for s in collection.references_for("tas")] == ["for-tas", "also-tas", "plain"]
    assert [s.name for s in collection.references_for("pr")] == ["for-pr", "for-tas", "plain"]
    assert [s.name for s in collection.references_for("psl")] == ["plain"]


@pytest.mark.parametrize("case", list(BAD_MANIFESTS))
def test_bad_manifest_gives_one_helpful_line(case: str, demo: Path, tmp_path: Path) -> None:
    text, expected = BAD_MANIFESTS[case]
    reference = demo / "references" / "tessera-obs" / "tas_*.nc"
    manifest = write_manifest(tmp_path / "bad", text.replace("{ref}", str(reference)))
    with pytest.raises(InputError) as info:
        Collection.from_path(manifest)
    err = info.value
    assert expected in err.problem
    assert err.file == str(manifest) and err.remedy
    assert "\n" not in str(err) and str(err).startswith(str(manifest))


def test_missing_path_and_empty_folder(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="no such manifest or folder") as info:
        Collection.from_path(tmp_path / "absent.toml")
    assert info.value.remedy
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no manifest.toml and no references") as info:
        Collection.from_path(tmp_path / "empty")
    assert "runs/<name>" in info.value.remedy


def test_layout_folder_without_files(tmp_path: Path) -> None:
    (tmp_path / "c" / "runs" / "a").mkdir(parents=True)
    with pytest.raises(InputError, match="matches no file"):
        Collection.from_path(tmp_path / "c")


def test_manifest_that_is_not_text(tmp_path: Path) -> None:
    path = tmp_path / "manifest.toml"
    path.write_bytes(b"\xff\xfe\x00binary")
    with pytest.raises(InputError) as info:
        Collection.from_path(path)
    assert info.value.file == str(path)
