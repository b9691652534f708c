"""Recipes: validation errors name the file and key; bundled recipes load and run on the demo."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from aligner.bench import load_bench
from aligner.errors import RecipeError
from aligner.recipes import bundled_recipes, find_recipe, load_recipe, run_recipe

GOOD = """\
[recipe]
title = "t"
cautions = ["Follow your local laser-safety rules."]

[[step]]
do = "say"
text = "hello"
"""


def write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "r.toml"
    p.write_text(text, encoding="utf-8")
    return p


BAD = [
    ("[recipe]\ntitle = 1\n[[step]]\ndo = 'say'\ntext = 'x'\n", "recipe.title"),
    (GOOD.replace('do = "say"', 'do = "sya"'), "did you mean 'say'"),
    (GOOD.replace('text = "hello"', 'txet = "hello"'), "step[0].txet"),
    (GOOD.replace('text = "hello"', ""), "step[0].text"),
    (GOOD + '[[step]]\ndo = "plan"\n', "exactly one of amplification or leak_rate"),
    (GOOD + '[[step]]\ndo = "plan"\namplification = -3\n', "step[1].amplification"),
    (GOOD + '[[step]]\ndo = "plan"\namplification = 40\naxis = "x"\n', "step[1].axis"),
    (GOOD + '[[step]]\ndo = "sweep"\n', "step[1].schedule"),
    (GOOD + '[[step]]\ndo = "plan"\nleak_rate = 1e-3\napply = "yes"\n', "step[1].apply"),
    ("[recipe]\ntitle = 't'\n", "at least one [[step]]"),
    (GOOD + "extra = 1\n", "extra"),
    ("not toml [", "not valid TOML"),
]


@pytest.mark.parametrize(("text", "needle"), BAD)
def test_bad_recipes_name_the_key(tmp_path: Path, text: str, needle: str) -> None:
    path = write(tmp_path, text)
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    assert str(path) in str(info.value)
    assert needle in str(info.value)


def test_bundled_recipes_load_and_carry_cautions() -> None:
    recipes = bundled_recipes()
    assert len(recipes) >= 3
    for recipe in recipes:
        assert recipe.cautions, recipe.name
        assert any("laser safety officer" in c for c in recipe.cautions), recipe.name


def test_unknown_recipe_suggests_a_bundled_one() -> None:
    with pytest.raises(RecipeError, match="did you mean 'find-null'"):
        find_recipe("find-nul")


def test_set_amplification_runs_on_the_demo_bench(tmp_path: Path) -> None:
    lines: list[str] = []
    result = run_recipe(
        find_recipe("set-amplification"),
        load_bench("demo"),
        confirm=lambda _text: True,
        report=lines.append,
        db=str(tmp_path / "runs.sqlite"),
        seed=3,
    )
    assert result.completed, result.message
    kinds = [o.do for o in result.outcomes]
    assert kinds == ["confirm", "plan", "predict", "sweep", "say"]
    # the predict step after an applied plan sees the planned amplification
    predicted = result.outcomes[2].values["amplification"]["linear"]
    assert predicted == pytest.approx(40.0, rel=0.01)
    assert result.outcomes[3].values["status"] == "complete"


def test_find_null_finds_the_simulated_true_null(tmp_path: Path) -> None:
    result = run_recipe(
        find_recipe("find-null"),
        load_bench("demo"),
        confirm=lambda _text: True,
        report=lambda _t: None,
        seed=5,
    )
    assert result.completed
    null = next(o for o in result.outcomes if o.do == "null").values
    assert null["converged"]
    # the simulated bench hides offset and retardance errors: its true null, by a fine grid
    # search of the true bench's leak rate, is what the closed loop must find
    import numpy as np

    from aligner.prediction import predict
    from aligner.run.simbench import true_bench

    grid = np.linspace(134.0, 136.0, 20001)
    leak = predict(true_bench(load_bench("demo")), {"analyzer": grid}).leak_rate
    true_null = grid[np.argmin(leak)]
    assert abs(null["null_reading_deg"] - true_null) < 3 * null["null_reading_err_deg"] + 0.002


def test_refusing_a_check_stops_before_any_engine_step() -> None:
    result = run_recipe(
        find_recipe("find-null"),
        load_bench("demo"),
        confirm=lambda _text: False,
        report=lambda _t: None,
    )
    assert not result.completed
    assert result.outcomes == ()
    assert "step 1" in result.message


#: The counter, shutter and pointer declared (with the half-wave plate's mount declared "sim"),
#: so a bench with a real analyzer passes the real-bench rule and reaches the recipe's checks.
DECLARED_SIM = """
[devices.counter]
driver = "sim"
[devices.shutter]
driver = "sim"
[devices.pointer]
driver = "none"
"""


def test_cli_refuses_yes_on_a_real_bench(tmp_path: Path, bench_text: str) -> None:
    bench = tmp_path / "real.toml"
    bench.write_text(
        bench_text.replace("[mounts.ana]\n", '[mounts.ana]\ndriver = "/dev/ttyX"\n').replace(
            "[mounts.hwp]\n", '[mounts.hwp]\ndriver = "sim"\n'
        )
        + DECLARED_SIM,
        encoding="utf-8",
    )
    out = subprocess.run(
        [sys.executable, "-m", "aligner", "recipe", "run", "find-null", str(bench), "--yes"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert out.returncode == 2
    assert "--yes is only for simulated benches" in out.stderr
    assert "Traceback" not in out.stderr


def test_every_recipe_that_moves_mounts_names_beam_blocks_and_eyewear() -> None:
    # common practice, no source: beam blocks at reject ports and rated eyewear before moving
    for recipe in bundled_recipes():
        moves = any(s.do in ("null", "sweep", "plan") for s in recipe.steps)
        text = " ".join(recipe.cautions).lower()
        if moves:
            assert "beam block" in text and "eyewear" in text, recipe.name
