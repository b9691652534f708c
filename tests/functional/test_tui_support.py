"""Helpers shared by the desk's Pilot tests (no tests here): build the desk on the demo bench
with simulated devices and a temporary run log, read what the screen shows, keep screenshots.

Screenshots (SVG) go to ``$ALIGNER_DESK_SHOTS`` when set (CI keeps that folder as an
artifact), else to pytest's temporary folder; they are never committed.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

from textual.worker import WorkerCancelled

from aligner.bench import Bench
from aligner.tui.app import DeskApp
from aligner.tui.backend import DeskBackend

SIZES = {"80x24": (80, 24), "160x48": (160, 48)}
_BOX = str.maketrans(dict.fromkeys("│╭╮╰╯─▔▁▎▊▏", " "))


def desk(
    bench: Bench,
    tmp_path: Path,
    *,
    realtime: bool = False,
    station_factory: Callable[[Bench], Any] | None = None,
) -> DeskApp:
    """The desk on ``bench`` with its run log in ``tmp_path``."""
    backend = DeskBackend(
        bench, db_path=tmp_path / "runs.sqlite", realtime=realtime, station_factory=station_factory
    )
    return DeskApp(backend)


def words(text: str) -> str:
    """Box-drawing characters dropped and whitespace collapsed."""
    return " ".join(text.translate(_BOX).split())


def text_of(app: DeskApp, selector: str) -> str:
    """The words a widget renders (borders dropped, lines joined by one space), whether or not
    it is scrolled into view."""
    widget = app.screen.query_one(selector)
    lines = widget.render_lines(widget.region.reset_offset)
    return words(" ".join(strip.text for strip in lines))


def on_screen(app: DeskApp) -> str:
    """The words on the whole screen as the terminal shows it now."""
    return words(" ".join(strip.text for strip in app.screen._compositor.render_strips()))


def shown_in(app: DeskApp, selector: str) -> str:
    """The words on the screen inside a widget's region, its children's included."""
    region = app.screen.query_one(selector).region
    strips = app.screen._compositor.render_strips()[region.y : region.bottom]
    return words(" ".join(strip.crop(region.x, region.right).text for strip in strips))


async def seen(pilot: Any, selector: str) -> str:
    """Scroll ``selector`` into view, then the words on the screen in its region."""
    widget = pilot.app.screen.query_one(selector)
    widget.scroll_visible(animate=False, immediate=True)
    await pilot.pause()
    return shown_in(pilot.app, selector)


async def workers_done(pilot: Any) -> None:
    """Wait for the running workers (one replaced by a newer request counts as done)."""
    for _ in range(50):
        try:
            await pilot.app.workers.wait_for_complete()
            return
        except WorkerCancelled:
            continue


async def settle(pilot: Any, extra_s: float = 0.0) -> None:
    """Let every worker finish and the screen catch up."""
    await workers_done(pilot)
    await pilot.pause(extra_s or None)
    await workers_done(pilot)
    await pilot.pause()


async def limits_shown(pilot: Any) -> None:
    """Wait (up to a few seconds) until the bench screen has its limits and curves."""
    for _ in range(100):
        await settle(pilot, 0.05)
        plots = pilot.app.screen.query_one("#bench-plots")
        limits = pilot.app.screen.query_one("#limits")
        if limits.border_subtitle == "" and plots.curve is not None and plots.drawn:
            return
    raise AssertionError("the limits never arrived")


def screenshot(app: DeskApp, name: str, tmp_path: Path) -> Path:
    """Save an SVG of the screen as a test artifact; return its path."""
    folder = Path(os.environ.get("ALIGNER_DESK_SHOTS") or tmp_path)
    folder.mkdir(parents=True, exist_ok=True)
    return Path(app.save_screenshot(f"{name}.svg", str(folder)))


def reading_box(app: DeskApp, mount: str) -> Any:
    """The bench screen's reading input of ``mount``."""
    return app.screen.query_one("#readings").input_for(mount)
