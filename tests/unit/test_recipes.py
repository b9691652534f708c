"""Recipe files: validation names the file, the step and the key, suggests the nearest key, and
keeps every value to its range; hostile files are refused before anything runs; the bundled
recipes load and carry the laser and detector cautions."""

from __future__ import annotations

import string
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from aligner.bench import load_bench
from aligner.errors import RecipeError
from aligner.recipe import bundled_recipes, check_bench, find_recipe, load_recipe
from aligner.recipe.format import LIMITS, QUANTITIES, STEP_KINDS, parse_recipe

HEAD = """\
[recipe]
title = "t"
purpose = "p"
duration_min = 1
cautions = ["Follow your local laser-safety rules and your laser safety officer."]
"""
GOOD = (
    HEAD
    + """
[[step]]
do = "note"
text = "hello"

[[step]]
do = "measure"
dwell_s = 0.5
name = "here"
"""
)


def write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "r.toml"
    p.write_text(text, encoding="utf-8")
    return p


BAD = [
    (HEAD.replace('title = "t"', "title = 1"), "recipe.title"),
    (HEAD.replace("duration_min = 1", "duration_min = 1e9"), "from 0.1 to 600"),
    (HEAD.replace('purpose = "p"', 'purpos = "p"'), "did you mean 'purpose'"),
    (GOOD.replace('do = "note"', 'do = "ntoe"'), "did you mean 'note'"),
    (GOOD.replace('text = "hello"', 'txet = "hello"'), "step 1.txet"),
    (GOOD.replace('text = "hello"', ""), "step 1.text: is required"),
    (GOOD.replace("dwell_s = 0.5", "dwell_s = 1e300"), "step 2.dwell_s: must be a number from"),
    (GOOD.replace("dwell_s = 0.5", "dwell_s = nan"), "step 2.dwell_s"),
    (GOOD.replace("dwell_s = 0.5", 'dwell_s = "0.5"'), "step 2.dwell_s"),
    (GOOD + '[[step]]\ndo = "plan"\nname = "p"\n', "exactly one of amplification or leak_rate"),
    (GOOD + '[[step]]\ndo = "plan"\namplification = 40\naxis = "x"\nname = "p"\n', "step 3.axis"),
    (GOOD + '[[step]]\ndo = "check"\nquantity = "nowhere.leak_rate"\nmax = 1\n', "'nowhere'"),
    (GOOD + '[[step]]\ndo = "check"\nquantity = "here.leak_rat"\nmax = 1\n', "leak_rate"),
    (GOOD + '[[step]]\ndo = "fit"\nfit = "null"\nscan = "here"\nname = "f"\n', "scan or sweep"),
    (GOOD + '[[step]]\ndo = "measure"\ndwell_s = 1\nname = "here"\n', "already the name"),
    (GOOD + '[[step]]\ndo = "move"\nmount = "analyzer"\n', "exactly one of to_deg"),
    (GOOD + '[[step]]\ndo = "move"\nmount = "analyzer"\nto = "here.counts"\n', "not a reading"),
    (
        GOOD + '[[step]]\ndo = "scan"\nmount = "analyzer"\nspan_deg = 80\nstep_deg = 0.01\n'
        'dwell_s = 1\nname = "s"\n',
        "at most 201",
    ),
    (GOOD + '[[step]]\ndo = "sweep"\nschedule = "linear:0:1:100000"\nname = "w"\n', "at most"),
    (GOOD + '[[step]]\ndo = "recall"\nresult = "later"\nname = "x"\n', "step 3.result"),
    (HEAD.replace('cautions = ["', 'cautions = ["\x1b[2J'), "not valid TOML"),
    (HEAD.replace('cautions = ["', 'cautions = ["\\u001b[2J') + GOOD[len(HEAD) :], "cautions[1]"),
    (HEAD + '[[step]]\ndo = "note"\ntext = "a\\u001b[31mred"\n', "step 1.text: holds a control"),
    (HEAD + '[[step]]\ndo = "note"\ntext = "' + "x" * 3000 + '"\n', "at most 2000"),
    (HEAD, "at least one [[step]]"),
    ("extra = 1\n" + GOOD, "unknown top-level key"),
    (GOOD + "extra = 1\n", "step 2.extra: not a key here"),
    ("not toml [", "not valid TOML"),
]


@pytest.mark.parametrize(("text", "needle"), BAD)
def test_bad_recipes_name_the_file_step_and_key(tmp_path: Path, text: str, needle: str) -> None:
    path = write(tmp_path, text)
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    assert str(path) in str(info.value)
    assert needle in str(info.value)


def test_a_good_recipe_loads(tmp_path: Path) -> None:
    recipe = load_recipe(write(tmp_path, GOOD))
    assert [s.do for s in recipe.steps] == ["note", "measure"]
    assert recipe.steps[1].name == "here" and recipe.steps[1].number == 2


def test_size_limits_are_stated_in_the_message(tmp_path: Path) -> None:
    big = write(tmp_path, GOOD + "# " + "x" * LIMITS["file_bytes"])
    with pytest.raises(RecipeError, match=f"at most {LIMITS['file_bytes']} bytes"):
        load_recipe(big)
    many = HEAD + '[[step]]\ndo = "note"\ntext = "x"\n' * (LIMITS["steps"] + 1)
    with pytest.raises(RecipeError, match=f"at most {LIMITS['steps']} allowed"):
        load_recipe(write(tmp_path, many))


@pytest.mark.parametrize("depth", [3, 50, 5000])
def test_deep_nesting_is_refused(tmp_path: Path, depth: int) -> None:
    text = GOOD.replace('text = "hello"', "text = " + "[" * depth + "1" + "]" * depth)
    with pytest.raises(RecipeError, match=r"nested|deep"):
        load_recipe(write(tmp_path, text))


def test_mounts_are_checked_against_the_bench_before_step_1(tmp_path: Path) -> None:
    text = GOOD + '[[step]]\ndo = "move"\nmount = "periscope"\nby_deg = 1\n'
    recipe = load_recipe(write(tmp_path, text))
    with pytest.raises(RecipeError, match=r"step 3\.mount: the bench has no mount 'periscope'"):
        check_bench(recipe, load_bench("demo"))
    needs = load_recipe(
        write(tmp_path, GOOD.replace("duration_min", 'needs = ["post-qwp"]\nduration_min'))
    )
    with pytest.raises(RecipeError, match=r"recipe\.needs\[1\]: role 'post-qwp'"):
        check_bench(needs, load_bench("demo"))


def test_every_quantity_table_matches_a_step_kind() -> None:
    for key in QUANTITIES:
        assert key.partition(":")[0] in STEP_KINDS


def test_bundled_recipes_are_the_five_and_carry_the_cautions() -> None:
    recipes = {r.name: r for r in bundled_recipes()}
    assert set(recipes) == {
        "cross-analyzer",
        "waveplate-axis",
        "pre-selection",
        "working-amplification",
        "daily-drift",
    }
    demo = load_bench("demo")
    for recipe in recipes.values():
        check_bench(recipe, demo)
        text = " ".join(recipe.cautions).lower()
        # common practice, no source: local rules and the laser safety officer first, rated
        # eyewear, beam blocks at reject ports, the detector kept from bright light
        assert "laser safety officer" in text and "local laser-safety rules" in text
        assert "eyewear" in text and "beam block" in text and "detector" in text


def test_unknown_recipe_suggests_a_known_one() -> None:
    with pytest.raises(RecipeError, match="did you mean 'cross-analyzer'"):
        find_recipe("cross-analyser")


# -- property tests: any document is a recipe or a RecipeError, never anything else -------------

_KEYS = sorted({k for keys in STEP_KINDS.values() for k in keys} | {"do", "title"})
_scalars = st.one_of(
    st.text(string.printable, max_size=30),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.sampled_from([*STEP_KINDS, "here.counts", "x", "analyzer", "linear:0:1:3"]),
)
_values = st.recursive(
    _scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=3), st.dictionaries(st.text(max_size=5), inner, max_size=3)
    ),
    max_leaves=8,
)
_steps = st.lists(st.dictionaries(st.sampled_from(_KEYS), _values, max_size=6), max_size=5)
_heads = st.fixed_dictionaries(
    {},
    optional={
        "title": _scalars,
        "purpose": _scalars,
        "duration_min": _scalars,
        "cautions": st.lists(_scalars, max_size=3),
        "needs": st.lists(_scalars, max_size=3),
    },
)


@settings(max_examples=300, deadline=None)
@given(head=_heads, steps=_steps)
def test_random_documents_give_a_recipe_or_a_recipe_error(head, steps) -> None:
    try:
        parse_recipe({"recipe": head, "step": steps}, Path("random.toml"))
    except RecipeError as exc:
        assert str(exc).startswith("random.toml: ")


@settings(
    max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(text=st.text(alphabet=string.printable + "[]{}=\"'.#\n", max_size=300))
def test_random_toml_text_gives_a_recipe_or_a_recipe_error(tmp_path: Path, text: str) -> None:
    path = tmp_path / "random.toml"
    path.write_text(HEAD + text, encoding="utf-8")
    try:
        load_recipe(path)
    except RecipeError as exc:
        assert str(path) in str(exc)
