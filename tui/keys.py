"""The dashboard's keys, one entry each: the bindings, the key list (`?`) and the captions are made from KEYS.

A key's caption sits on the edge of what it acts on (the curve's frame, the class table's frame,
the progress frame, the top line), and only while it can act: there is no bar of keys at the
bottom. To add a key: one Key here (its place, its words) and the app's `action_<name>` method.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

# Where captions sit: the top line, and the frames of the curve, the class table and the progress.
PLACES = ("top", "curve", "classes", "progress")


@dataclass(frozen=True)
class Key:
    key: str                        # Textual's key name ("question_mark")
    label: str                      # as printed ("?")
    action: str                     # the app's action (action_<name>)
    words: object                   # the caption after the key: a str, or f(app) -> str (None: not shown now)
    help: str                       # its line in the key list
    place: str                      # one of PLACES
    when: Callable | None = None    # f(app) -> bool: the key acts (and is listed) only then; None: always

    def active(self, app) -> bool:
        return self.when is None or bool(self.when(app))

    def caption(self, app) -> str | None:
        if not self.active(app):
            return None
        return self.words(app) if callable(self.words) else self.words


def _classes(app) -> bool:
    v = app.view
    return v is None or v.is_classes


def _stop_words(app) -> str | None:
    return "stop job" if app.status == "running" and not (app.view and app.view.stop_requested) else None


def _axis_words(app) -> str:
    return f"members axis: {'log' if app.log_x else 'linear'}"


def _raw_words(app) -> str:
    return f"textbook curve: {'shown' if getattr(app, 'show_raw', True) else 'hidden'}"


def _class_words(app) -> str:
    hidden = getattr(app, "classes_hidden", 0)
    return f"next class ({hidden} more)" if hidden else "next class"


KEYS = [
    Key("q", "q", "leave", "leave", "leave the dashboard; the job goes on (Ctrl-C does the same)", "top"),
    Key("s", "s", "stop_job", _stop_words, "ask the job to stop cleanly (asks first)", "progress"),
    Key("l", "l", "log_scale", _axis_words, "member axis: linear or log scale", "curve"),
    Key("r", "r", "raw_curve", _raw_words, "show or hide the textbook OOB curve (faint) beside the estimate",
        "curve"),
    Key("c", "c", "cycle_class", _class_words, "highlight the next class in the curve and tables", "classes",
        when=_classes),
    Key("m", "m", "cycle_measure", "next measure", "curve: the next measure (error, AUC, log loss, ...; MSE, MAE, "
        "R2), from the run's own", "curve"),
    Key("question_mark", "?", "help", "keys", "this list", "top"),
    Key("escape", "Esc", "back", "back to the comparison", "back to the comparison's board (a candidate opened "
        "from it)", "top", when=lambda app: getattr(app, "back", False)),
]


def bindings():
    """Textual bindings of KEYS (none shown by Textual: the captions are drawn on the panels), and Ctrl-C."""
    from textual.binding import Binding
    out = [Binding(k.key, k.action, k.label, show=False) for k in KEYS]
    # Ctrl-C leaves like q (the job goes on), from any screen: not the framework's "press ctrl+q" notice.
    out.append(Binding("ctrl+c", "leave", "leave", show=False, priority=True))
    return out


def captions(app, place: str) -> list[tuple[str, str]]:
    """(label, words) of the keys shown at `place` now."""
    out = []
    for k in KEYS:
        if k.place == place:
            words = k.caption(app)
            if words:
                out.append((k.label, words))
    return out


def caption_markup(pairs) -> str:
    """Captions as Textual markup for a frame's edge: the key bold, its words as the edge's colour."""
    from textual.markup import escape
    return "  ".join(f"[b]{escape(label)}[/b] {escape(words)}" for label, words in pairs)


def listed(app) -> list[tuple[str, str]]:
    """(label, help) of the keys that act now, for the key list."""
    return [(k.label, k.help) for k in KEYS if k.active(app)]


def disabled(app, action: str) -> bool:
    """True when `action` belongs to a key that does not act now (Textual then ignores the key)."""
    return any(k.action == action and not k.active(app) for k in KEYS)
