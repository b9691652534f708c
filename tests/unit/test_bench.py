"""Bench files: loading, the table of bad files and the key each error must name, write-back."""

from __future__ import annotations

import math

import numpy as np
import pytest

from aligner.bench import DEMO_BENCH, load_bench, write_values
from aligner.errors import BenchFileError, InputError
from aligner.physics.materials import plate_retardance_waves

HWP = 'type = "hwp"\nmount = "hwp"'
DETECTOR_TABLE = (
    "[detector]\nefficiency = 0.5\ndark_rate = 10.0\ndead_time_ns = 20.0\nsafe_rate = 1.0e6\n"
)
ANALYZER_TABLE = (
    '[analyzer]\nmount = "ana"              # crossed with D at 135 deg\n'
    "extinction_ratio = 1e4\ntransmission = 0.9\n"
)

# (case id, text to replace in the minimal bench, replacement, key the message must name,
#  further text the message must contain)
BAD_FILES = [
    (
        "unknown-top-key",
        "wavelength_nm = 800.0",
        "wavelenght_nm = 800.0",
        "wavelenght_nm",
        "did you mean 'wavelength_nm'",
    ),
    (
        "unknown-source-key",
        "photon_rate = 1.0e6",
        "photon_rat = 1.0e6",
        "source.photon_rat",
        "did you mean 'photon_rate'",
    ),
    (
        "unknown-element-key",
        HWP,
        HWP + "\nretardance_wave = 0.5",
        "pre[0].retardance_wave",
        "did you mean 'retardance_waves'",
    ),
    (
        "unknown-mount-key",
        "reading_deg = 22.5",
        "reading_dg = 22.5",
        "mounts.hwp.reading_dg",
        "did you mean 'reading_deg'",
    ),
    (
        "unknown-plate-key",
        HWP,
        HWP + '\nplate = { materal = "quartz" }',
        "pre[0].plate.materal",
        "did you mean 'material'",
    ),
    (
        "unknown-detector-key",
        "dark_rate = 10.0",
        "dark_rates = 10.0",
        "detector.dark_rates",
        "did you mean 'dark_rate'",
    ),
    ("nan-wavelength", "wavelength_nm = 800.0", "wavelength_nm = nan", "wavelength_nm", "finite"),
    (
        "nan-extinction",
        "extinction_ratio = 1e5",
        "extinction_ratio = nan",
        "source.extinction_ratio",
        "finite",
    ),
    ("inf-photon-rate", "photon_rate = 1.0e6", "photon_rate = inf", "source.photon_rate", "finite"),
    (
        "inf-offset",
        "reading_deg = 22.5",
        "reading_deg = 22.5\noffset_deg = inf",
        "mounts.hwp.offset_deg",
        "finite",
    ),
    (
        "inf-travel",
        "travel_deg = [-10.0, 350.0]",
        "travel_deg = [-10.0, inf]",
        "mounts.ana.travel_deg",
        "finite",
    ),
    (
        "negative-photon-rate",
        "photon_rate = 1.0e6",
        "photon_rate = -1.0e6",
        "source.photon_rate",
        "greater than 0",
    ),
    (
        "negative-dark-rate",
        "dark_rate = 10.0",
        "dark_rate = -10.0",
        "detector.dark_rate",
        "at least 0",
    ),
    (
        "negative-dead-time",
        "dead_time_ns = 20.0",
        "dead_time_ns = -1.0",
        "detector.dead_time_ns",
        "at least 0",
    ),
    (
        "negative-safe-rate",
        "safe_rate = 1.0e6",
        "safe_rate = -inf",
        "detector.safe_rate",
        "greater than 0",
    ),
    (
        "zero-efficiency",
        "efficiency = 0.5",
        "efficiency = 0.0",
        "detector.efficiency",
        "greater than 0",
    ),
    (
        "efficiency-above-one",
        "efficiency = 0.5",
        "efficiency = 1.2",
        "detector.efficiency",
        "at most 1",
    ),
    (
        "transmission-above-one",
        "transmission = 0.9",
        "transmission = 1.5",
        "analyzer.transmission",
        "at most 1",
    ),
    (
        "extinction-below-one",
        "extinction_ratio = 1e4",
        "extinction_ratio = 0.5",
        "analyzer.extinction_ratio",
        "must be above 1",
    ),
    (
        "extinction-exactly-one",
        "extinction_ratio = 1e4",
        "extinction_ratio = 1",
        "analyzer.extinction_ratio",
        "would pass both polarizations alike",
    ),
    (
        "source-extinction-zero",
        "extinction_ratio = 1e5",
        "extinction_ratio = 0",
        "source.extinction_ratio",
        "must be above 1",
    ),
    (
        "element-extinction-below-one",
        HWP,
        'type = "polarizer"\nangle_deg = 10.0\nextinction_ratio = 0.9',
        "pre[0].extinction_ratio",
        "must be above 1",
    ),
    # values the validator used to accept but the physics cannot use (fault hunt)
    (
        "resolution-larger-than-travel",
        "travel_deg = [-10.0, 350.0]",
        "travel_deg = [-10.0, 350.0]\nresolution_deg = 400.0",
        "mounts.ana.resolution_deg",
        "at most 36",
    ),
    (
        "huge-photon-rate",
        "photon_rate = 1.0e6",
        "photon_rate = 1e155",
        "source.photon_rate",
        "1e+12",
    ),
    ("huge-angle", "reading_deg = 22.5", "reading_deg = 1e155", "mounts.hwp.reading_deg", "3600"),
    (
        "tiny-observable-axis",
        'observable = "HV"',
        'observable = "axis"\naxis = [1e-320, 0.0, 0.0]',
        "coupling.axis",
        "must be a direction",
    ),
    ("wavelength-far-out", "wavelength_nm = 800.0", "wavelength_nm = 1e-3", "wavelength_nm", "100"),
    (
        "unknown-element-mount",
        'mount = "hwp"',
        'mount = "hwpp"',
        "pre[0].mount",
        "did you mean 'hwp'",
    ),
    (
        "unknown-analyzer-mount",
        'mount = "ana" ',
        'mount = "anna" ',
        "analyzer.mount",
        "did you mean 'ana'",
    ),
    (
        "unknown-imbalance-mount",
        'imbalance_mount = "ana"',
        'imbalance_mount = "anna"',
        "imbalance_mount",
        "did you mean 'ana'",
    ),
    (
        "imbalance-mount-holds-nothing",
        'imbalance_mount = "ana"',
        'imbalance_mount = "spare"',
        "imbalance_mount",
        "holds no element",
    ),
    (
        "unknown-simulation-mount",
        "[mounts.hwp]",
        "[simulation]\ntrue_offset_deg = { nope = 0.1 }\n\n[mounts.hwp]",
        "simulation.true_offset_deg.nope",
        "unknown key",
    ),
    (
        "sense-zero",
        "reading_deg = 22.5",
        "reading_deg = 22.5\nsense = 0",
        "mounts.hwp.sense",
        "+1 or -1",
    ),
    (
        "sense-text",
        "reading_deg = 22.5",
        'reading_deg = 22.5\nsense = "cw"',
        "mounts.hwp.sense",
        "must be a number",
    ),
    (
        "sense-bool",
        "reading_deg = 22.5",
        "reading_deg = 22.5\nsense = true",
        "mounts.hwp.sense",
        "must be a number",
    ),
    (
        "travel-reversed",
        "travel_deg = [-10.0, 350.0]",
        "travel_deg = [350.0, -10.0]",
        "mounts.ana.travel_deg",
        "low < high",
    ),
    (
        "travel-three-numbers",
        "travel_deg = [-10.0, 350.0]",
        "travel_deg = [-10.0, 0.0, 350.0]",
        "mounts.ana.travel_deg",
        "list of 2",
    ),
    (
        "reading-outside-travel",
        "reading_deg = 136.0",
        "reading_deg = 400.0",
        "mounts.ana.reading_deg",
        "outside travel_deg",
    ),
    ("missing-detector-table", DETECTOR_TABLE, "", "[detector]", "required"),
    ("missing-analyzer-table", ANALYZER_TABLE, "", "[analyzer]", "required"),
    ("missing-required-key", "strength = 1.0\n", "", "coupling.strength", "required"),
    (
        "text-for-number",
        "wavelength_nm = 800.0",
        'wavelength_nm = "800"',
        "wavelength_nm",
        "must be a number",
    ),
    ("unknown-element-type", 'type = "hwp"', 'type = "hwpp"', "pre[0].type", "did you mean 'hwp'"),
    ("angle-and-mount", HWP, HWP + "\nangle_deg = 3.0", "pre[0].angle_deg", "not both"),
    (
        "retarder-without-retardance",
        'type = "hwp"',
        'type = "retarder"',
        "pre[0].retardance_waves",
        "required",
    ),
    (
        "negative-retardance",
        HWP,
        HWP + "\nretardance_waves = -0.5",
        "pre[0].retardance_waves",
        "at least 0",
    ),
    (
        "plate-outside-dispersion-fit",
        HWP,
        HWP + "\nplate = { design_nm = 3000.0 }",
        "pre[0].plate.design_nm",
        "outside the quartz dispersion fit",
    ),
    (
        "unknown-observable",
        'observable = "HV"',
        'observable = "XY"',
        "coupling.observable",
        "must be one of",
    ),
    (
        # common practice, no source: a subnormal width overflows every ratio formed with it
        "subnormal-pointer-width",
        "pointer_sigma = 100.0",
        "pointer_sigma = 2.225073858507203e-309",
        "coupling.pointer_sigma",
        "of size 1e-12 to 1e+12",
    ),
    (
        "coupling-beyond-double-precision",
        "pointer_sigma = 100.0\nstrength = 1.0",
        "pointer_sigma = 1.0e-6\nstrength = 1.0e7",
        "coupling.strength",
        "pointer widths",
    ),
    (
        "source-not-a-table",
        "[source]\nangle_deg = 0.0\nextinction_ratio = 1e5\nphoton_rate = 1.0e6\n",
        "source = 5\n",
        "source",
        "must be a table",
    ),
]


def _bad_text(text: str, old: str, new: str) -> str:
    assert text.count(old) == 1, f"test table error: {old!r} is not unique in the minimal bench"
    out = text.replace(old, new)
    if "spare" in new:
        out += "\n[mounts.spare]\nreading_deg = 0.0\n"
    return out


@pytest.mark.parametrize(
    ("old", "new", "key", "extra"),
    [case[1:] for case in BAD_FILES],
    ids=[case[0] for case in BAD_FILES],
)
def test_bad_bench_file_names_the_key(write_bench, bench_text, old, new, key, extra):
    # Requirement (foundation issue): every error names the file, the key with its table and
    # what is allowed; one line; an InputError (exit status 2).
    path = write_bench(_bad_text(bench_text, old, new))
    with pytest.raises(BenchFileError) as info:
        load_bench(path)
    exc = info.value
    assert exc.key == key
    assert str(exc).startswith(f"{path}: {key}: ")
    assert extra in str(exc)
    assert "\n" not in str(exc)
    assert isinstance(exc, InputError) and exc.exit_code == 2


def test_a_huge_file_is_refused_quickly(tmp_path):
    big = tmp_path / "big.toml"
    big.write_text("# padding\n" * 200_000, encoding="utf-8")
    with pytest.raises(BenchFileError, match="at most 1,000,000"):
        load_bench(big)


def test_too_many_elements_are_refused(write_bench, bench_text):
    many = bench_text + '\n[[post]]\ntype = "rotator"\nangle_deg = 0.0\n' * 65
    with pytest.raises(BenchFileError, match="at most 64"):
        load_bench(write_bench(many))


def test_minimal_bench_loads(bench_file):
    bench = load_bench(bench_file)
    assert bench.path == bench_file
    assert bench.wavelength_nm == 800.0 and bench.imbalance_mount == "ana"
    assert bench.source.extinction_ratio == 1e5 and bench.source.photon_rate == 1e6
    assert bench.pre[0].type == "hwp" and bench.pre[0].retardance_waves == 0.5
    assert bench.analyzer.mount == "ana" and bench.analyzer.transmission == 0.9
    assert bench.mounts["ana"].travel_deg == (-10.0, 350.0)
    assert bench.readings() == {"hwp": 22.5, "ana": 136.0}
    assert math.isinf(bench.pre[0].extinction_ratio)


def test_demo_bench_loads_by_name():
    bench = load_bench("demo")
    assert bench.path == DEMO_BENCH
    assert bench.imbalance_mount in bench.mounts and bench.phase_mount in bench.mounts


def test_toml_infinity_is_an_ideal_extinction(write_bench, bench_text):
    bench = load_bench(
        write_bench(bench_text.replace("extinction_ratio = 1e4", "extinction_ratio = inf"))
    )
    assert math.isinf(bench.analyzer.extinction_ratio)


@pytest.mark.parametrize("text", ["wavelength_nm = = 3\n", "a = 1\na = 2\n", "[source\n"])
def test_not_toml(write_bench, text):
    path = write_bench(text)
    with pytest.raises(BenchFileError, match="not valid TOML") as info:
        load_bench(path)
    assert info.value.key is None and str(info.value).startswith(str(path))


def test_file_missing(tmp_path):
    path = tmp_path / "absent.toml"
    with pytest.raises(BenchFileError, match="file not found") as info:
        load_bench(path)
    assert str(path) in str(info.value) and "demo" in str(info.value)


def test_mount_angle_mapping_round_trips(write_bench, bench_text):
    # Convention (foundation issue): element angle = sense * (reading - offset).
    text = bench_text.replace(
        "reading_deg = 22.5", "reading_deg = 22.5\nsense = -1\noffset_deg = 10.0"
    )
    mount = load_bench(write_bench(text)).mounts["hwp"]
    assert mount.element_angle_deg(22.5) == pytest.approx(-12.5)
    readings = np.linspace(-100, 100, 7)
    np.testing.assert_allclose(
        mount.reading_for_angle_deg(mount.element_angle_deg(readings)), readings
    )


def test_plate_retardance_resolved_at_bench_wavelength(write_bench, bench_text):
    # Cross-check with the materials module (itself checked against Ghosh 1999).
    text = bench_text.replace(HWP, HWP + '\nplate = { kind = "zero-order", design_nm = 830.0 }')
    element = load_bench(write_bench(text)).pre[0]
    expected = plate_retardance_waves(0.5, "quartz", "zero-order", 830.0, 800.0)
    assert element.retardance_waves == pytest.approx(float(expected), rel=1e-14)
    assert element.plate is not None and element.plate.design_nm == 830.0


def test_fractional_plate_order_is_refused(write_bench, bench_text):
    text = bench_text.replace(HWP, HWP + '\nplate = { kind = "multi-order", order = 2.5 }')
    with pytest.raises(BenchFileError, match=r"pre\[0\]\.plate\.order"):
        load_bench(write_bench(text))


# --------------------------------------------------------------------------------------------
# write_values


def test_write_values_keeps_comments_and_stores_values(bench_file):
    before = bench_file.read_text()
    write_values(bench_file, {"mounts.ana.reading_deg": 135.25, "mounts.hwp.offset_deg": 0.125})
    after = bench_file.read_text()
    assert "# minimal test bench" in after
    assert "reading_deg = 135.25        # 1 deg past crossed" in after
    assert after.count("#") == before.count("#")
    bench = load_bench(bench_file)
    assert bench.mounts["ana"].reading_deg == 135.25
    assert bench.mounts["hwp"].offset_deg == 0.125
    assert not list(bench_file.parent.glob("*.tmp"))


@pytest.mark.parametrize(
    ("update", "key"),
    [
        ({"mounts.ana.sense": 3}, "mounts.ana.sense"),
        ({"mounts.ana.reading_deg": 400.0}, "mounts.ana.reading_deg"),
        ({"mounts.ana.offset_deg": float("nan")}, "mounts.ana.offset_deg"),
        ({"detector.efficiency": 0.0}, "detector.efficiency"),
        (
            {"mounts.ana.reading_deg": 135.0, "analyzer.extinction_ratio": 0.1},
            "analyzer.extinction_ratio",
        ),
        ({"nosuch.key": 1.0}, "nosuch"),
    ],
)
def test_write_values_refuses_invalid_update_without_touching_file(bench_file, update, key):
    before = bench_file.read_bytes()
    with pytest.raises(BenchFileError) as info:
        write_values(bench_file, update)
    assert info.value.key == key
    assert bench_file.read_bytes() == before
    assert not list(bench_file.parent.glob("*.tmp"))


def test_write_values_accepts_numpy_float(bench_file):
    write_values(bench_file, {"mounts.ana.offset_deg": np.float64(0.5)})
    assert load_bench(bench_file).mounts["ana"].offset_deg == 0.5


def test_write_values_numpy_integer(bench_file):
    write_values(bench_file, {"mounts.ana.sense": np.int64(-1)})
    assert load_bench(bench_file).mounts["ana"].sense == -1


def test_duplicate_key_is_a_bench_file_error(write_bench, bench_text):
    text = bench_text.replace("dead_time_ns = 20.0", "dead_time_ns = 20.0\ndead_time_ns = 30.0")
    with pytest.raises(BenchFileError, match="dead_time_ns"):
        load_bench(write_bench(text))


def test_misspelt_driver_is_caught_when_the_file_loads(write_bench, bench_text):
    text = bench_text.replace("[mounts.ana]\n", '[mounts.ana]\ndriver = "simm"\n')
    with pytest.raises(BenchFileError, match=r"mounts\.ana\.driver.*did you mean 'sim'"):
        load_bench(write_bench(text))


def test_rotator_on_a_mount_is_refused(write_bench, bench_text):
    post = '[[post]]\ntype = "rotator"\nmount = "hwp"\n\n[coupling]'
    text = bench_text.replace("[coupling]", post)
    with pytest.raises(BenchFileError, match=r"post\[0\]\.mount.*angle_deg"):
        load_bench(write_bench(text))


def test_gate_dark_probability_must_leave_room_for_light(write_bench, bench_text):
    text = bench_text.replace("safe_rate = 1.0e6", "safe_rate = 1.0e6\ngate_dark_probability = 1.0")
    with pytest.raises(BenchFileError, match=r"detector\.gate_dark_probability"):
        load_bench(write_bench(text))


def test_write_values_refuses_the_bundled_demo_bench():
    from aligner.bench import DEMO_BENCH

    before = DEMO_BENCH.read_text(encoding="utf-8")
    with pytest.raises(BenchFileError, match="demo bench is not written to"):
        write_values(str(DEMO_BENCH.resolve()), {"mounts.analyzer.reading_deg": 136.5})
    assert DEMO_BENCH.read_text(encoding="utf-8") == before
