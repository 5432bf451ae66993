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
