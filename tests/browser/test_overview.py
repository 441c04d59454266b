"""The overview on the sample collection, in headless Chromium: the "Showing" line names the
seasons and regions drawn, hover gives the numbers behind each value, and the sub-view
travels in the link."""

from __future__ import annotations

import re

import numpy as np
import pytest

from evaluation.regions import REGIONS, parse_region

from .conftest import open_dashboard, wait_for_view
from .overview_page import overview_plots, showing
from .test_view_axes_and_period import wait_for_query

pytestmark = pytest.mark.browser
OVERVIEW_TIMEOUT_MS = 300_000


def open_overview(browser, url: str, search: str):
    session = open_dashboard(browser, f"{url}/?tab=overview&{search}")
    # a sub-view scores every variable of the collection for five seasons or eight regions:
    # minutes on a loaded machine when nothing is cached yet
    wait_for_view(session.page, "overview", timeout_ms=OVERVIEW_TIMEOUT_MS)
    return session


def ranked_runs(plots) -> list[str]:
    """The run names of the label panel, in rank order ("1. name")."""
    texts = [t["text"].replace("\n", " ") for p in plots for t in p["texts"] if re.match(r"^\d+\. ", t["text"])]
    return [t.split(". ", 1)[1] for t in sorted(texts, key=lambda t: int(t.split(".")[0]))]


def test_showing_names_every_season_and_the_region_drawn(browser, served_sample) -> None:
    session = open_overview(browser, served_sample, "overview_by=season&region=arctic&season=JJA")
    try:
        text = showing(session.page)
        # the region of the sidebar, and the five seasons drawn (not the sidebar's JJA alone)
        assert parse_region("arctic").label in text
        assert "seasons ANN, DJF, MAM, JJA, SON" in text
        runs = ranked_runs(overview_plots(session.page))
        assert f"median over the {len(runs)} runs shown" in text
        assert session.errors() == []
    finally:
        session.close()


def test_showing_names_every_region_and_the_season_drawn(browser, served_sample) -> None:
    session = open_overview(browser, served_sample, "overview_by=region&region=arctic&season=JJA")
    try:
        text = showing(session.page)
        assert "regions " + ", ".join(parse_region(r).label for r in REGIONS) in text
        assert " · JJA · " in text
        # each sub-row is labelled with its region (the name before the latitudes)
        drawn = {t["text"] for p in overview_plots(session.page) for t in p["texts"]}
        assert {parse_region(r).label.split(" (")[0] for r in REGIONS} <= drawn
    finally:
        session.close()


def _number(text: str) -> float:
    return float(re.match(r"^\s*([-+0-9.eE]+)", text).group(1))


def test_hover_gives_the_rmse_the_median_and_the_run_count(browser, served_sample) -> None:
    session = open_overview(browser, served_sample, "overview_by=variable&region=global&season=ANN")
    page = session.page
    try:
        plots = overview_plots(page)
        tas = next(p for p in plots if p["title"] == "tas")
        dots = tas["dots"]
        assert len(dots) >= 3
        rmse = np.array([_number(d["row"]["rmse_text"]) for d in dots])
        median = np.median(rmse)  # Gleckler et al. 2008: the median over the runs compared
        dot = dots[0]
        page.mouse.move(dot["x"], dot["y"])
        labels = page.locator(".bk-tooltip-row-label")
        labels.filter(has_text="Median RMSE").first.wait_for(state="visible", timeout=10_000)
        values = page.locator(".bk-tooltip-row-value")
        found = {labels.nth(i).inner_text().strip().rstrip(":"): values.nth(i).inner_text().strip() for i in range(labels.count())}
        assert found["Run"] == dot["row"]["model"]
        assert int(found["Runs in the median"]) == len(dots)
        # the median printed is the median of the RMSEs drawn (4 significant digits)
        assert _number(found["Median RMSE"]) == pytest.approx(median, rel=1e-3)
        # and the relative error is (E - median E) / median E (Gleckler et al. 2008), to the two decimals shown
        e = _number(found["RMSE"])
        assert _number(found["Relative error"]) == pytest.approx((e - median) / median, abs=0.006)
        assert found["Reference"] == dot["row"]["reference"] and re.fullmatch(r"\d{4}-\d{4}", found["Period"])
    finally:
        session.close()


def test_sub_view_travels_in_the_link(browser, served_sample) -> None:
    first = open_overview(browser, served_sample, "overview_by=variable")
    try:
        first.page.locator(".gs-overview-by").get_by_text("By region", exact=True).click()
        wait_for_query(first.page, overview_by="region", tab="overview")
        wait_for_view(first.page, "overview", timeout_ms=OVERVIEW_TIMEOUT_MS)
        link = first.page.url
    finally:
        first.close()
    second = open_dashboard(browser, link)
    try:
        wait_for_view(second.page, "overview", timeout_ms=OVERVIEW_TIMEOUT_MS)
        wait_for_query(second.page, overview_by="region")
        assert "regions Global" in showing(second.page)
        active = second.page.locator(".gs-overview-by .bk-active")
        assert active.inner_text().strip() == "By region"
    finally:
        second.close()
