"""The dashboard's aligned text columns (common practice for text tables, no source)."""
from rich.text import Text

from tui.widgets.texttable import bar, pairs, table_width, text_table


def test_columns_line_up_right_and_left():
    t = text_table([["a", "1", "x"], ["bbbb", "1,000", "yy"]], header=["name", "n", "z"],
                   justify=["left", "right", "left"], gap=2)
    lines = t.plain.split("\n")
    assert lines == ["name      n  z", "a         1  x", "bbbb  1,000  yy"]
    assert table_width([["a", "1", "x"], ["bbbb", "1,000", "yy"]], ["name", "n", "z"], gap=2) == len(lines[2])


def test_styles_survive_and_rows_can_be_marked():
    t = text_table([[Text("red", style="red"), "1"], ["b", "2"]], row_styles=["", "reverse"])
    assert [str(s.style) for s in t.spans if t.plain[s.start:s.end] == "red"] == ["red"]
    second = t.plain.index("b")
    assert any(str(s.style) == "reverse" and s.start == second for s in t.spans)


def test_pairs_pad_labels_and_bar_has_its_width():
    t = pairs([("pid", "12"), ("memory", "3 MB")], label_width=7)
    assert t.plain.split("\n") == ["pid     12", "memory  3 MB"]
    for done, total in ((0, 10), (3, 10), (10, 10), (7, 0)):
        assert len(bar(done, total, 21, "blue", "grey").plain) == 21
    assert bar(10, 10, 21, "b", "g").plain == "━" * 21


# ---- the same lines as segments (tui/widgets/base.py): what the panels hand Textual

def _plain(lines):
    return ["".join(s.text for s in ln) for ln in lines]


def _styles(lines):
    return {s.text: s.style for ln in lines for s in ln}


def test_segment_lines_match_the_text_they_come_from():
    from rich.console import Console
    from tui.widgets.base import pair_lines, text_lines
    get_style = Console().get_style
    rows = [("members", Text("120 of 500", style="bold")), ("", bar(3, 10, 21, "blue", "grey50")),
            ("pace", "5 members/s"), ("to go", "-")]
    # pair_lines builds what pairs() would, without the Text
    assert _plain(pair_lines(rows, get_style)) == pairs(rows).plain.split("\n")
    t = text_table([[Text("red", style="red"), "1"], ["b", "2"]], row_styles=["", "reverse"])
    lines = text_lines(t, get_style)
    assert _plain(lines) == t.plain.split("\n")
    assert _styles(lines)["red"].color.name == "red"
    assert all(s.style.reverse for s in lines[1] if s.text.strip())


def test_fit_pads_or_cuts_with_an_ellipsis_to_the_cell():
    from rich.cells import cell_len
    from rich.segment import Segment
    from tui.widgets.base import ELLIPSIS, fit
    segs = [Segment("members "), Segment("1,234 of 100,000")]
    for width in (1, 5, 8, 9, 24, 30):
        out = "".join(s.text for s in fit(list(segs), width))
        assert cell_len(out) == width
        if width < 24:
            assert out.endswith(ELLIPSIS) and out[:-1] == "members 1,234 of 100,000"[:width - 1]
        else:
            assert out.rstrip() == "members 1,234 of 100,000"
    wide = "".join(s.text for s in fit([Segment("分类 ab")], 4))   # two-cell characters are not split
    assert cell_len(wide) == 4 and wide.endswith(ELLIPSIS)
