"""After a change of region, the score table's cells in headless Chromium against the CSV that
``gridscore score`` writes for that region (the command line: outside the dashboard's view).

- every number shown equals the CSV's value to the decimals the cell shows (a cell reads the
  value rounded to its column's format);
- the cells marked best are the ones the rule of the page names (bias: smallest magnitude,
  RMSE and relative error: smallest, correlation and Taylor skill: largest, ratios: nearest
  one; common practice), applied with numpy to the CSV's values, with bias, RMSE and relative
  error marked only where the CSV's bootstrap bound (``abs_bias_diff_hi``, ``rmse_diff_hi``)
  lies below zero (the rule the page states), and a marked cell is drawn tinted as a whole;
- a run whose name holds markup and braces is shown as written.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view
from .test_region_change_tables import PERIOD, TROPICS, _write

pytestmark = pytest.mark.browser

#: A run's name from a manifest: markup, an entity and format braces, to be shown literally.
HOSTILE = "<i>warm</i> &amp; {0}"
#: metric -> how its best value is chosen (common practice; the page's explanation states it).
RULES = {"bias": "zero", "rmse": "low", "crmse": "low", "corr": "high", "std_ratio": "one", "taylor_skill": "high", "rel_error": "low"}
#: metric -> the CSV's bootstrap bound that must lie below zero for the mark (the page's rule).
GUARDED = {"bias": "abs_bias_diff_hi", "rmse": "rmse_diff_hi", "rel_error": "rmse_diff_hi"}

#: Per row of the climatology table: the run's name and, per field, the cell's text and whether
#: its value is drawn marked (bold) and its cell tinted.
_CELLS_JS = """() => {
  const find = (root, sel, out) => { for (const e of root.querySelectorAll(sel)) out.push(e);
    for (const e of root.querySelectorAll("*")) if (e.shadowRoot) find(e.shadowRoot, sel, out); return out; };
  const view = find(document, ".gs-view-scores", [])[0];
  const rows = find(view, ".tabulator-row", view.shadowRoot ? find(view.shadowRoot, ".tabulator-row", []) : []);
  return rows.map(r => Array.from(r.querySelectorAll(".tabulator-cell")).map(c => ({
    field: c.getAttribute("tabulator-field"), text: c.textContent,
    bold: getComputedStyle(c.firstElementChild ?? c).fontWeight === "700",
    tint: getComputedStyle(c).backgroundColor, markup: c.querySelector("i") !== null})));
}"""


@pytest.fixture(scope="module")
def marked(tmp_path_factory: pytest.TempPathFactory):
    root = tmp_path_factory.mktemp("marks")
    for name in ("ref", "warm", "cool"):
        _write(root / name, name)
    manifest = root / "manifest.toml"
    escaped = HOSTILE.replace("\\", "\\\\").replace('"', '\\"')
    manifest.write_text(
        '[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref/*.nc"]\n'
        f'[[source]]\nname = "{escaped}"\nrole = "model"\npaths = ["warm/*.nc"]\n'
        '[[source]]\nname = "cool"\nrole = "model"\npaths = ["cool/*.nc"]\n',
        encoding="utf-8",
    )
    results = Results(Collection.from_path(manifest))
    with serving(results) as url:
        yield url, root
    results.close()


def _cli_table(root: Path, out: Path) -> pd.DataFrame:
    """The tropics' scores as ``gridscore score`` writes them (same runs, period and season)."""
    exe = Path(sys.executable).with_name("gridscore")
    args = [str(exe), "score", "--reference", f"ref={root / 'ref' / 'tas.nc'}", "--model", f"{HOSTILE}={root / 'warm' / 'tas.nc'}",
            "--model", f"cool={root / 'cool' / 'tas.nc'}", "--variable", "tas", "--region", "tropics", "--season", "ANN",
            "--period", PERIOD, "--output", str(out)]
    done = subprocess.run(args, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    table = pd.read_csv(out)
    assert set(table["region"]) == {"tropics"}
    return table


def _best(values: dict[str, float], rule: str) -> set[str]:
    """The runs holding the best value by ``rule`` (ties all best; NaN never)."""
    v = np.array(list(values.values()), dtype="float64")
    score = {"high": -v, "low": v, "zero": np.abs(v), "one": np.abs(v - 1.0)}[rule]
    if not np.isfinite(score).any():
        return set()
    top = np.nanmin(score)
    return {run for run, s in zip(values, score, strict=True) if np.isfinite(s) and np.isclose(s, top, rtol=1e-12, atol=0.0)}


def _number(text: str) -> tuple[float, int]:
    """A cell's number and its count of decimals ("1,234.50" -> (1234.5, 2))."""
    text = text.strip().replace(",", "")
    mantissa = text.split("e")[0]
    return float(text), len(mantissa.split(".")[1]) if "." in mantissa else 0


def test_cells_after_a_region_change_are_the_command_lines_numbers_and_marks(browser, marked, tmp_path: Path) -> None:
    url, root = marked
    csv = _cli_table(root, tmp_path / "tropics.csv")
    value = {(r.model, r.metric): float(r.value) for r in csv[csv["reference"] == "ref"].itertuples()}

    session = open_dashboard(browser, f"{url}/?tab=scores&period={PERIOD}&region=global")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    page.locator(".gs-region select").select_option(label=TROPICS)
    page.locator(".gs-view-scores").get_by_text("Region Tropics", exact=False).first.wait_for(timeout=60_000)
    wait_for_view(page, "scores", what=".tabulator-row")
    # the climatology table: the rows whose cells include the bias (the first table of the view)
    rows = [r for r in page.evaluate(_CELLS_JS) if any(c["field"] == "bias" for c in r)]
    assert len(rows) == 2, rows
    runs = [next(c["text"] for c in r if c["field"] == "Run") for r in rows]
    assert sorted(runs) == sorted([HOSTILE, "cool"])  # the name as written, markup not applied
    assert not any(c["markup"] for r in rows for c in r)

    marks = 0
    for metric, rule in RULES.items():
        shown = {run: next(c for c in r if c["field"] == metric) for run, r in zip(runs, rows, strict=True)}
        for run, cell in shown.items():
            number, decimals = _number(cell["text"])
            # the CSV's value, rounded to the decimals the cell shows
            assert abs(number - value[(run, metric)]) <= 0.5 * 10.0 ** -decimals + 1e-12, (run, metric, cell["text"])
        best = _best({run: value[(run, metric)] for run in runs}, rule)
        if metric in GUARDED:
            best = {run for run in best if value[(run, GUARDED[metric])] < 0}
        assert {run for run, c in shown.items() if c["bold"]} == best, (metric, shown)
        marks += len(best)
        for run, c in shown.items():
            # a marked cell tinted as a whole (the page's highlight), the others not
            assert (c["tint"] == "rgb(215, 240, 236)") == (run in best), (metric, run, c["tint"])
    assert marks >= 3  # the rule marks cells in these files (a table without marks would prove nothing)
    assert session.errors() == []
    session.close()
