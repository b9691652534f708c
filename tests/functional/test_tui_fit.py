"""Nothing the desk shows is cut off at 80x24 or at 120x40: a recipe's cautions and long
questions wrap and scroll (keys reach them) with the way to answer beside the answer box; the
beam path's numbers are whole; the amplification as seen stands beside the limit it compares
with; a long schedule in the run list is folded, not cut; F1 says what each key does on the
screen it is pressed on."""

from __future__ import annotations

from test_tui_support import desk, on_screen, seen, settle, text_of
from textual.widgets import OptionList

from aligner.bench import load_bench
from aligner.prediction import predict
from aligner.recipe import find_recipe
from aligner.tui.format import num
from aligner.tui.screens.help import HelpScreen


async def _ask_first_question(pilot, app, name: str) -> None:
    await pilot.press("f8")
    await settle(pilot)
    index = next(i for i, e in enumerate(app.screen.entries) if e.name == name)
    app.screen.query_one("#recipe-list", OptionList).highlighted = index
    await pilot.pause()
    await pilot.press("ctrl+s")
    for _ in range(300):
        if app.screen.asking:
            break
        await pilot.pause(0.02)
    await pilot.pause(0.1)


async def test_a_long_question_and_the_cautions_are_whole_at_80x24(tmp_path):
    recipe = find_recipe("cross-analyzer")
    question = recipe.steps[0].args["text"]
    assert recipe.steps[0].do == "confirm" and len(question) > 120  # longer than the panel
    app = desk(load_bench("demo"), tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ask_first_question(pilot, app, "cross-analyzer")
        try:
            await _check_question_and_cautions(pilot, app, recipe, question)
        finally:  # the recipe's worker waits for an answer: pause it
            app.screen.action_pause()
            await settle(pilot)


async def _check_question_and_cautions(pilot, app, recipe, question: str) -> None:
    assert app.screen.asking == "confirm"
    current, lines = text_of(app, "#recipe-current"), text_of(app, "#recipe-lines")
    assert " ".join(question.split()) in current and "…" not in current
    for caution in recipe.cautions:
        assert " ".join(caution.split()) in lines
    assert "…" not in lines
    shown = on_screen(app)
    assert "QUESTION:" in shown and "type yes or no, then Enter" in shown
    # the question's last words are on the screen, not only rendered
    assert " ".join(question.split()[-4:]) in shown
    # Shift+Tab from the answer box reaches the cautions; Home scrolls back to them
    await pilot.press("shift+tab")
    dialogue = app.screen.query_one("#recipe-dialogue")
    assert app.focused is dialogue
    await pilot.press("home")
    await pilot.pause()
    assert dialogue.scroll_y == 0
    top = on_screen(app)  # words of one line (the recipe list shares the screen's rows)
    assert (
        "cautions before you start:" in top and f"caution: {recipe.cautions[0].split()[0]}" in top
    )


async def test_the_recipe_screen_help_names_its_own_keys(tmp_path):
    app = desk(load_bench("demo"), tmp_path)
    async with app.run_test(size=(100, 40)) as pilot:
        await pilot.press("f8")
        await settle(pilot)
        await pilot.press("f1")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        shown = text_of(app, "#help-keys")
        assert "start the chosen recipe" in shown
        assert "go on with the paused recipe run" in shown
        assert "pick a recipe" in shown and "yes or no" in shown
        assert "a new sweep run" not in shown and "paused sweep run" not in shown


async def test_beam_path_numbers_and_the_amplification_as_seen_are_whole(tmp_path):
    bench = load_bench("demo")
    p = predict(bench, bench.readings())
    numbers = [f"η {num(bench.detector.efficiency, 2)}", "0.62"]
    numbers += [f"{num(e.retardance_waves, 4)} λ" for e in bench.pre if e.type == "qwp"]
    assert "3.25 λ" in numbers  # the demo's multi-order quarter-wave plate
    for size in ((120, 40), (80, 24)):
        app = desk(bench, tmp_path)
        async with app.run_test(size=size) as pilot:
            await settle(pilot, 0.3)
            shown = await seen(pilot, "#beam-path")
            for number in numbers:
                assert number in shown, (size, number, shown)
            shown = await seen(pilot, "#prediction")
            assert f"ampl. as seen {num(p.amplification_seen, 5)}" in shown
            assert f"exact {num(p.amplification_exact, 5)}" in shown


async def test_a_long_schedule_is_folded_not_cut_in_the_run_list(tmp_path):
    from aligner.tui.backend import DeskBackend

    bench = load_bench("demo")
    backend = DeskBackend(bench, db_path=tmp_path / "runs.sqlite")
    backend.sweep("amplification:5:50:3", 0.2, bench.readings(), on_point=lambda *a: None)
    backend.close()
    for size in ((80, 24), (120, 40)):
        app = desk(bench, tmp_path)
        async with app.run_test(size=size) as pilot:
            await pilot.press("f7")
            await settle(pilot)
            shown = await seen(pilot, "#runs")
            assert "amplification:5:50:3" in "".join(shown.split()), (size, shown)
