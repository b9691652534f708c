"""Text from files, devices and users is data: make it safe for a terminal, the desk or a report.

:func:`clean` removes control characters (terminal escape sequences included), so a recipe,
a bench name or a device reply cannot move the cursor, erase the screen or change colours;
:func:`safe_text` also escapes Rich/Textual markup (``[bold]``, ``[/]``), so the text shows as
written. Apply it where the text meets Rich or Textual, not earlier (the stored
data keeps what was given).
"""

from __future__ import annotations

import re

__all__ = ["clean", "safe_text"]

# ESC-introduced sequences (CSI, OSC, two-character), then any other C0/C1 control but tab and
# newline, and DEL
_ESCAPES = re.compile(r"\x1b(\[[0-?]*[ -/]*[@-~]|\][^\x07\x1b]*(\x07|\x1b\\)?|[@-Z\\-_])")
_CONTROLS = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")


def clean(text: object) -> str:
    """``text`` as a string without terminal escape sequences and control characters (tab and
    newline are kept)."""
    return _CONTROLS.sub("", _ESCAPES.sub("", str(text)))


def safe_text(text: object) -> str:
    """``text`` cleaned (:func:`clean`) and with Rich markup escaped, for ``Console.print``
    and widgets that render markup. Emoji codes (``:smile:``) cannot be escaped in markup:
    print through consoles made with ``emoji=False`` (:func:`aligner.cli.common.console`)."""
    from rich.markup import escape

    return escape(clean(text))
