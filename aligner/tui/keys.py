"""Every key the desk binds, in one place: one meaning per key on every screen.

The convention: F1 is help, F2 and up switch screens (:data:`aligner.tui.app.SCREENS`), and
actions are Ctrl + a letter, each letter meaning one thing wherever it appears (Ctrl+S starts
measuring on the sweep screen and on the meter alike). No binding uses a letter a terminal
multiplexer takes as its prefix (Ctrl+A, Ctrl+B) or one a text field edits with (Ctrl+A, E, D,
W, U, K, X, C, V); arrows and page keys act on the focused widget only. Every binding is
``priority`` so it works while a text field has the focus.

A key keeps its action and short name (the footer's) everywhere; what it does in full (its
tooltip, which the F1 help lists) is said for each screen with :func:`on_screen` where the
screens differ (the sweep screen's words are the defaults).
"""

from __future__ import annotations

from dataclasses import replace

from textual.binding import Binding

__all__ = [
    "AXIS",
    "COPY_TO_BENCH",
    "FILE_READINGS",
    "GO_ON",
    "HELP",
    "MOVE_TO_PLAN",
    "NEW_MIN_MAX",
    "NULL_READING",
    "PAUSE",
    "QUIT",
    "READ_AGAIN",
    "START",
    "on_screen",
]


def _key(key: str, action: str, description: str, tooltip: str = "") -> Binding:
    return Binding(key, action, description, priority=True, tooltip=tooltip)


def on_screen(binding: Binding, does: str) -> Binding:
    """``binding`` with what it does on one screen (``does``, the F1 help's and the footer
    tooltip's words); key, action and short name unchanged."""
    return replace(binding, tooltip=does)


HELP = _key("f1", "app.help", "Help", "every key of this screen")
QUIT = _key("ctrl+q", "app.quit", "Quit", "quit (asks first while a sweep runs)")
START = _key("ctrl+s", "start", "Start", "start a new sweep run (asks first when real mounts move)")
PAUSE = _key(
    "ctrl+p", "pause", "Pause", "pause after the point being counted: mounts stopped, shutter shut"
)
GO_ON = _key("ctrl+g", "go_on", "Go on", "resume the paused sweep run")
READ_AGAIN = _key("ctrl+r", "read_again", "Read again", "read the run log or the devices again")
FILE_READINGS = _key(
    "ctrl+f", "file_readings", "File readings", "put the bench file's readings on this screen"
)
NULL_READING = _key(
    "ctrl+l",
    "null_reading",
    "Null reading",
    "put the model's null on the imbalance mount's reading (nothing moves)",
)
AXIS = _key("ctrl+t", "toggle_axis", "Axis re/im", "plan for Re A_w or Im A_w")
COPY_TO_BENCH = _key(
    "ctrl+o",
    "copy_to_bench",
    "Readings to bench screen",
    "copy the planned readings to the bench screen (nothing moves)",
)
MOVE_TO_PLAN = _key(
    "ctrl+y",
    "move_to_plan",
    "Move mounts to plan",
    "turn the mounts to the planned readings through the detector guard (asks first)",
)
NEW_MIN_MAX = _key("ctrl+n", "new_min_max", "New min/max", "forget the held minimum and maximum")
