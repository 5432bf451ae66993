"""Colours and plot markers of the dashboard, chosen for a dark or light background alike."""
from __future__ import annotations

OVERALL = (232, 226, 208)          # warm off-white: the all-rows curve
BAND = (118, 128, 140)             # slate: the 95% band
DIMMED = (84, 90, 98)              # classes not highlighted while one is
BAR_DONE = (112, 162, 212)         # the progress bar: members done
BAR_LEFT = (58, 64, 72)            # and to go
CLASSES = [
    (92, 172, 160),    # teal
    (214, 166, 92),    # ochre
    (152, 132, 204),   # lavender
    (204, 112, 124),   # rose
    (112, 162, 212),   # sky
    (162, 182, 92),    # moss
    (192, 142, 182),   # heather
    (132, 192, 144),   # sage
]

# Without colour the lines differ by their marks instead.
MONO_OVERALL = "@"
MONO_BAND = "."
MONO_CLASSES = "123456789abcdefghijklmnopqrstuvwxyz"
MONO_DIMMED = None                 # classes not highlighted while one is: braille dots, no mark
MONO_DIMMED_KEY = "⠒"              # and how the curve's key shows them

STATUS_STYLE = {
    "waiting": "italic",
    "running": "bold",
    "finished": "bold",
    "stopped": "bold",
    "failed": "bold reverse",
    "crashed": "bold reverse",
}


def class_colour(k: int) -> tuple[int, int, int]:
    return CLASSES[k % len(CLASSES)]


def class_mark(k: int) -> str:
    return MONO_CLASSES[k % len(MONO_CLASSES)]


def rgb(c: tuple[int, int, int]) -> str:
    """A rich colour for an (r, g, b) triple."""
    return "rgb({},{},{})".format(*c)
