"""The desk's keys: no terminal-multiplexer prefix, one modifier convention, one meaning per key
on every screen, none that a text field edits with, and F1 lists every key of the screen."""

from __future__ import annotations

import importlib
import re

import pytest
from test_tui_support import desk, settle, text_of
from textual.binding import Binding
from textual.widgets import Input

from aligner.bench import load_bench
from aligner.tui.app import SCREENS, DeskApp
from aligner.tui.screens.help import HelpScreen, key_name

#: Default prefixes of the common terminal multiplexers (Ctrl+B, Ctrl+A).
MULTIPLEXER_PREFIXES = {"ctrl+a", "ctrl+b"}


def screen_class(entry):
    module, name = entry.target.split(":")
    return getattr(importlib.import_module(module), name)


def keys_of(binding: Binding) -> list[str]:
    return binding.key.split(",")


def every_binding() -> list[tuple[str, Binding]]:
    """(where, binding) for the app and every screen of the desk."""
    out = [("app", b) for b in DeskApp.BINDINGS]
    for entry in SCREENS:
        out += [(entry.mode, b) for b in vars(screen_class(entry)).get("BINDINGS", ())]
    return out


def test_no_binding_is_a_multiplexer_prefix_or_a_text_field_key():
    editing = {k for b in Input.BINDINGS for k in keys_of(b)}
    for where, b in every_binding():
        for key in keys_of(b):
            assert key not in MULTIPLEXER_PREFIXES, f"{where}: {key}"
            assert key not in editing, f"{where}: {key} is a text field's editing key"


def test_one_modifier_convention_function_keys_and_ctrl_letters():
    for where, b in every_binding():
        for key in keys_of(b):
            assert re.fullmatch(r"f\d{1,2}|ctrl\+[a-z]", key), f"{where}: {key}"
            assert b.priority, f"{where}: {key} must work while a text field has the focus"


def test_a_key_means_one_thing_on_every_screen():
    meaning: dict[str, tuple[str, str, str]] = {}
    for where, b in every_binding():
        for key in keys_of(b):
            said = (b.action, b.description)
            if key in meaning:
                first, *_ = meaning[key]
                assert meaning[key][1:] == said, (
                    f"{key}: {first} {meaning[key][1:]}, {where} {said}"
                )
            else:
                meaning[key] = (where, *said)
    # the pairs the issue named: file readings vs resume, start / pause on two screens
    assert meaning["ctrl+s"][1:] == ("start", "Start")
    assert meaning["ctrl+p"][1:] == ("pause", "Pause")


def test_screens_have_their_own_function_keys_and_f1_is_help():
    keys = [entry.key for entry in SCREENS]
    assert len(set(keys)) == len(keys) and "f1" not in keys
    assert any(b.key == "f1" and b.action == "app.help" for b in DeskApp.BINDINGS)


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


@pytest.mark.parametrize("entry", SCREENS, ids=[s.mode for s in SCREENS])
async def test_f1_lists_every_key_of_the_screen(bench, tmp_path, entry):
    app = desk(bench, tmp_path)
    async with app.run_test(size=(100, 40)) as pilot:
        await pilot.press(entry.key)
        await settle(pilot)
        screen = app.screen
        await pilot.press("f1")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        shown = text_of(app, "#help-keys")
        bindings = [*DeskApp.BINDINGS, *vars(type(screen)).get("BINDINGS", ())]
        for widget in screen.query("*"):
            if type(widget).__module__.startswith("aligner.tui"):
                bindings += vars(type(widget)).get("BINDINGS", ())
        for b in bindings:
            assert key_name(b.key) in shown, f"{b.key} missing from the help of {entry.mode}"
        await pilot.press("f1")  # F1 again closes it
        await pilot.pause()
        assert app.screen is screen
