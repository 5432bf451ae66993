"""The braille line plot against a slow reference: dots set one by one, then cells spelled out.

Cell layout: Unicode 3.0, Braille Patterns block U+2800-U+28FF, dots 1-8 -> bits 0-7 (dots 1 2 3 7
down the left column, 4 5 6 8 down the right).
"""
import math

import numpy as np
import pytest

from tui.widgets.braille import Series, nice_step, plot, x_labels, y_ticks

# (column, row) in the cell -> dot number, from the Unicode chart
DOTS = {(0, 0): 1, (0, 1): 2, (0, 2): 3, (1, 0): 4, (1, 1): 5, (1, 2): 6, (0, 3): 7, (1, 3): 8}


def reference(points, cols, rows):
    """Cells from a set of dots (x, y), each cell its character by the Unicode dot numbering."""
    cells = [[0] * cols for _ in range(rows)]
    for x, y in points:
        cells[y // 4][x // 2] |= 1 << (DOTS[(x % 2, y % 4)] - 1)
    return ["".join(" " if b == 0 else chr(0x2800 + b) for b in row) for row in cells]


def unit_plot(series, cols, rows):
    """A plot of cols x rows cells of drawing on the unit square, as lines of the drawing alone."""
    label_w = max(len(lab) for lab in y_ticks(0.0, 1.0, rows)[1])
    text = plot(series, label_w + 1 + cols, rows + 1, x_range=(0, 1), y_range=(0, 1))
    return [ln[label_w + 1:].ljust(cols) for ln in text.plain.split("\n")[:-1]]


def test_single_dots_match_the_unicode_table():
    # one point per series, the axis ranges chosen so it lands on a known dot
    for (cx, cy), dot in DOTS.items():
        cols, rows = 3, 2
        W, H = 2 * cols, 4 * rows
        x, y = 2 + cx, 4 + cy                          # in the middle cell (1, 1)
        s = Series(np.array([x / (W - 1)]), np.array([1 - y / (H - 1)]), None)
        body = unit_plot([s], cols, rows)
        assert body[1][1] == chr(0x2800 + (1 << (dot - 1))), (cx, cy)
        assert body[0].strip() == "" and body[1][0] == " " and body[1][2] == " "


def test_lines_equal_dots_set_one_by_one():
    rng = np.random.default_rng(5)
    cols, rows = 30, 8
    W, H = 2 * cols, 4 * rows
    for _ in range(20):
        n = int(rng.integers(2, 12))
        xs, ys = np.sort(rng.random(n)), rng.random(n)
        # the same line by the plain definition: a point's dot is (x * (W - 1), (1 - y) * (H - 1))
        # rounded; a segment is sampled every 1/steps of its length, steps its longer side in dots + 1
        xd, yd = xs * (W - 1), (1 - ys) * (H - 1)
        pts = set()
        for i in range(n - 1):
            steps = int(max(abs(xd[i + 1] - xd[i]), abs(yd[i + 1] - yd[i]))) + 1
            for k in range(steps + 1):
                t = k / steps
                pts.add((int(np.rint(xd[i] + (xd[i + 1] - xd[i]) * t)),
                         int(np.rint(yd[i] + (yd[i + 1] - yd[i]) * t))))
        s = Series(xs, ys, None)
        got = unit_plot([s], cols, rows)
        want = reference(pts, cols, rows)
        assert got == want


def test_nan_breaks_the_line_and_lone_points_show():
    s = Series(np.array([0.0, 0.5, 1.0]), np.array([0.0, np.nan, 0.0]), None)
    text = plot([s], 12, 3, x_range=(0, 1), y_range=(0, 1))
    body = "".join(text.plain.split("\n")[:-1])
    # two lone dots (left and right bottom), nothing joined across the gap
    assert sum(ch != " " and ord(ch) >= 0x2800 for ch in body) == 2


def test_marks_replace_dots_without_colour():
    xs = np.linspace(0, 1, 20)
    s = Series(xs, 0.5 + 0 * xs, None, mark="@")
    text = plot([s], 24, 5, x_range=(0, 1), y_range=(0, 1))
    lines = text.plain.split("\n")
    assert any("@" * 10 in ln for ln in lines) and not any(0x2800 <= ord(c) <= 0x28FF for c in text.plain)


def test_later_series_colour_a_shared_cell():
    xs = np.array([0.0, 1.0])
    a, b = Series(xs, np.array([0.5, 0.5]), "red"), Series(xs, np.array([0.5, 0.5]), "blue")
    text = plot([a, b], 20, 4, x_range=(0, 1), y_range=(0, 1))
    styles = {str(sp.style) for sp in text.spans}
    assert "blue" in styles and "red" not in styles


@pytest.mark.parametrize("lo,hi", [(0.0, 1.0), (2.3, 97.1), (0.012, 0.019), (1e3, 5e5)])
def test_y_ticks_are_round_and_inside(lo, hi):
    # 1-2-5 steps: common practice for axis ticks, no source
    ticks, labels = y_ticks(lo, hi, 20)
    step = nice_step(hi - lo, max(3, 20 // 3))
    assert 3 <= len(ticks) <= 12
    assert all(lo - 1e-12 <= t <= hi + 1e-12 for t in ticks)
    assert all(math.isclose(b - a, step, rel_tol=1e-9) for a, b in zip(ticks, ticks[1:]))
    mant = step / 10 ** math.floor(math.log10(step))
    assert any(math.isclose(mant, m) for m in (1, 2, 5, 10))
    assert all(float(lab) == pytest.approx(t, abs=step / 100) for t, lab in zip(ticks, labels))


def test_x_labels_sit_under_their_ticks_and_never_overlap():
    line = x_labels(([0, 50, 100], ["0", "50", "100"]), 0.0, 100.0, 41, 3)
    assert line.index("50") in (22, 23) and line.rstrip().endswith("100")
    crowded = x_labels((list(range(0, 101, 5)), [str(t) for t in range(0, 101, 5)]), 0.0, 100.0, 20, 0)
    words = crowded.split()
    assert len(words) < 21 and all(w.isdigit() for w in words)     # dropped, not run together


def test_plot_fits_its_box():
    xs = np.arange(1, 300, dtype=float)
    s = [Series(xs, 1 / np.sqrt(xs), "red"), Series(xs, 0.5 / np.sqrt(xs), None, mark="1")]
    for w, h in ((20, 4), (60, 15), (117, 30)):
        text = plot(s, w, h, x_range=(1, 299), x_ticks=([1, 100, 200], ["1", "100", "200"]))
        lines = text.plain.split("\n")
        assert len(lines) == h and max(len(x) for x in lines) <= w
