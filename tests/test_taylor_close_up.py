"""When the Taylor diagram gets a close-up, and how the close-up names its points.

Outside references: plain rectangle arithmetic (two boxes overlap when both their x and
their y intervals do; common practice) and Taylor (2001) geometry for the points
(x = σ R, y = σ sqrt(1 - R²)).  The page itself is checked in tests/browser/test_taylor_close_up.py.
"""

from __future__ import annotations

import math
from itertools import combinations

import numpy as np

from app.views.taylor import CLOSE_UP_SHARE, close_up_window, place_labels

#: The width of a character and the height of a line the placement assumes (app.views.taylor).
CHAR, LINE = 8.0, 16.0


def box(x: float, y: float, text: str, align: str, baseline: str) -> tuple[float, float, float, float]:
    w = CHAR * len(text)
    left = {"left": x, "right": x - w, "center": x - w / 2}[align]
    bottom = {"bottom": y, "top": y - LINE, "middle": y - LINE / 2}[baseline]
    return left, bottom, left + w, bottom + LINE


def overlaps(a, b) -> bool:
    return min(a[2], b[2]) > max(a[0], b[0]) and min(a[3], b[3]) > max(a[1], b[1])


def taylor_xy(std: np.ndarray, corr: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    # Taylor (2001): radius σ, angle arccos R
    return std * corr, std * np.sqrt(1.0 - corr**2)


def test_bunched_points_get_a_close_up_that_holds_them_all() -> None:
    x, y = taylor_xy(np.array([1.0, 1.03, 0.98, 0.99]), np.array([1.0, 0.997, 0.998, 0.9996]))
    window = close_up_window(x, y, top=1.5)
    assert window is not None
    (x0, x1), (y0, y1) = window
    assert (x0 < x).all() and (x < x1).all() and (y0 < y).all() and (y < y1).all()
    assert y0 < 0.0 < y1  # the R = 1 axis (y = 0) is inside, with a strip under it for labels
    assert 0.55 - 1e-12 <= y1 / (x1 - x0) <= 1.0 + 1e-12
    assert max(x1 - x0, y1) < CLOSE_UP_SHARE * 1.5


def test_spread_points_keep_the_whole_diagram_alone() -> None:
    x, y = taylor_xy(np.array([1.0, 0.6, 1.3]), np.array([1.0, 0.7, 0.9]))
    assert close_up_window(x, y, top=1.75) is None
    assert close_up_window(np.array([1.0]), np.array([0.0]), top=1.5) is None  # the reference point alone


def test_crowded_names_do_not_overlap_where_there_is_room() -> None:
    # five points within 40 px of each other in a 470 x 400 px frame
    rng = np.random.default_rng(4)
    centre = np.array([235.0, 200.0])
    spots = centre + rng.uniform(-20, 20, size=(5, 2))
    names = ["larch-1", "birch-long-name", "oak", "rowan-2", "elm (ensemble mean)"]
    placed = place_labels([(x, y, n) for (x, y), n in zip(spots, names, strict=True)], obstacles=[],
                          markers=[tuple(s) for s in spots], frame=(470.0, 400.0))
    boxes = [box(x, y, text, align, baseline) for x, y, text, align, baseline in placed]
    assert [p[2] for p in placed] == names  # in the order given
    for a, b in combinations(boxes, 2):
        assert not overlaps(a, b), (a, b)
    for b in boxes:
        assert b[0] >= 0 and b[1] >= 0 and b[2] <= 470 and b[3] <= 400
    # each name starts near its own point (at most the farthest place: a diagonal 3.6 gaps of 9 px out)
    for (x, y, *_), (px, py) in zip(placed, spots, strict=True):
        assert math.hypot(x - px, y - py) <= 3.6 * 9.0 * math.hypot(0.75, 0.75) + 1e-9


def test_names_keep_off_taken_boxes_and_the_frame_edge() -> None:
    # a point at the right edge: its name goes to the left; a taken box above-left is avoided
    taken = (300.0, 200.0, 380.0, 216.0)
    placed = place_labels([(460.0, 190.0, "edge-run")], obstacles=[taken], markers=[(460.0, 190.0)], frame=(470.0, 400.0))
    x, y, text, align, baseline = placed[0]
    b = box(x, y, text, align, baseline)
    assert b[2] <= 470 and not overlaps(b, taken)


def test_more_names_than_room_still_stay_inside() -> None:
    count = 30
    # not feasible without overlaps: every name is still placed, inside the frame
    spots = [(50.0 + i % 3, 30.0 + i % 2, f"run-{i:02d}") for i in range(count)]
    placed = place_labels(spots, obstacles=[], markers=[(x, y) for x, y, _ in spots], frame=(120.0, 80.0))
    assert len(placed) == count
    for x, y, text, align, baseline in placed:
        b = box(x, y, text, align, baseline)
        assert b[0] >= 0 and b[1] >= 0 and b[2] <= 120 and b[3] <= 80
