"""The desk's recipe screen, driven as an operator would with Pilot: a bundled recipe runs to
its end on the simulated demo bench, its question answered in place; a pause stops it shut and
resumable, and Ctrl+G goes on where it stopped."""

from __future__ import annotations

from pathlib import Path

from textual.widgets import Input, OptionList

from aligner.bench import load_bench
from aligner.recipe import find_recipe
from aligner.run.log import RunLog
from aligner.tui.app import DeskApp
from aligner.tui.backend import DeskBackend

SIZE = (120, 36)


def _desk(tmp_path: Path) -> DeskApp:
    return DeskApp(DeskBackend(load_bench("demo"), db_path=tmp_path / "runs.sqlite"))


async def _choose(pilot, app: DeskApp, name: str) -> None:
    await pilot.press("f8")
    await pilot.pause()
    screen = app.screen
    index = next(i for i, e in enumerate(screen.entries) if e.name == name)
    screen.query_one("#recipe-list", OptionList).highlighted = index
    await pilot.pause()


async def _answer(pilot, app: DeskApp, text: str) -> None:
    for _ in range(200):  # the worker posts its question
        if app.screen.asking:
            break
        await pilot.pause(0.02)
    box = app.screen.query_one("#recipe-answer", Input)
    assert not box.disabled
    box.value = text
    await pilot.press("enter")


def _status(app: DeskApp) -> str:
    return str(app.screen.query_one("#recipe-status").render())


async def test_a_bundled_recipe_runs_to_its_end_from_the_recipe_screen(tmp_path):
    app = _desk(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _choose(pilot, app, "pre-selection")
        await pilot.press("ctrl+s")
        recipe = find_recipe("pre-selection")
        await _answer(pilot, app, "yes")  # its one confirmation, typed in place
        await app.workers.wait_for_complete()
        await pilot.pause()
        status = _status(app)
        assert "COMPLETE" in status and f"{len(recipe.steps)} of {len(recipe.steps)}" in status
        assert "shutter shut" in status
        steps = str(app.screen.query_one("#recipe-steps").render())
        assert "PASSED" in steps and "waiting" not in steps  # results in words
    with RunLog(tmp_path / "runs.sqlite") as log:
        run = log.runs()[0]
        assert run.kind == "recipe" and run.status == "complete"
        assert log.recipe_steps(run.id)[0].outcome["answer"] == "yes"


async def test_a_paused_recipe_is_shut_and_goes_on_with_ctrl_r(tmp_path):
    app = _desk(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _choose(pilot, app, "pre-selection")
        await pilot.press("ctrl+s")
        for _ in range(200):
            if app.screen.asking:
                break
            await pilot.pause(0.02)
        await pilot.press("ctrl+p")  # pause while the question is open
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert "STOPPED (operator)" in _status(app) and app.screen.paused_run is not None
        assert app.backend._station.shutter_open() is False
        await pilot.press("ctrl+g")
        await _answer(pilot, app, "y")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert "COMPLETE" in _status(app)
