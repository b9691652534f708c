"""Plug-in device specs: py:module:factory, plugin:NAME through entry points, check_spec."""

from __future__ import annotations

import importlib
import inspect
import sys
import textwrap
import tomllib

import pytest

from aligner.bench import parse_bench
from aligner.errors import (
    BenchFileError,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    Disconnected,
    InputError,
)
from aligner_drivers import plugins
from aligner_drivers.open import check_spec, open_counter, open_mount, open_pointer, open_shutter
from aligner_drivers.protocols import Counter, Identifies, PointerReader, RotationMount, Shutter

LAB_MODULE = '''
from __future__ import annotations

from pathlib import Path
from typing import Literal

CALLS = []


class Rotator:
    """A mount made in memory; records how it was built."""

    capabilities = frozenset({"home", "readback"})

    def __init__(
        self,
        port: str,
        *,
        name: str = "rotator",
        speed: float = 10.0,
        axis: int = 1,
        reversed: bool = False,
        travel: tuple[float, float] = (-90.0, 90.0),
        mode: Literal["fast", "fine"] = "fine",
        calibration: Path | None = None,
        note=None,
    ) -> None:
        CALLS.append(dict(port=port, name=name, speed=speed, axis=axis, reversed=reversed,
                          travel=travel, mode=mode, calibration=calibration, note=note))
        self.name = name
        self.at = 0.0
        self.closed = False

    def move_to(self, reading_deg):
        if reading_deg > 170:
            raise RuntimeError("vendor library: position out of range")
        if reading_deg < -170:
            raise OSError(5, "I/O error")
        self.at = reading_deg

    def position(self):
        return self.at

    def home(self):
        raise TimeoutError("no answer")

    def stop(self):
        pass

    def is_moving(self):
        return False

    def close(self):
        self.closed = True

    def identify(self):
        return "rotator 7"

    def temperature(self):
        return 21.5


def counter(channels: int = 1):
    class C:
        def __init__(self):
            self.channels = channels
            self.closed = False

        def count(self, dwell_s):
            return (5,) * channels

        def close(self):
            self.closed = True

    return C()


def shutter():
    class S:
        capabilities = frozenset()
        def open(self): pass
        def shut(self): pass
        def is_open(self): return False
        def close(self): pass
    return S()


def pointer(value: float = 1.5):
    class P:
        def read(self, dwell_s): return value, 0.25
        def close(self): pass
    return P()


def unnamed(speed: float = 1.0):
    """A factory without a name parameter."""
    return Rotator("x", speed=speed)


def refusing():
    from aligner.errors import DeviceRefused
    raise DeviceRefused("controller says no")


def unreachable():
    raise ConnectionRefusedError(111, "Connection refused")


def bad_caps():
    m = Rotator("x")
    m.capabilities = frozenset({"teleport"})
    return m


NOT_CALLABLE = 3
'''


@pytest.fixture
def lab(tmp_path, monkeypatch):
    """A lab's own driver package, importable as ``labdev.rotator``."""
    pkg = tmp_path / "labdev"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "rotator.py").write_text(LAB_MODULE)
    (pkg / "broken_dep.py").write_text("import vendor_sdk_not_installed\n")
    (pkg / "broken_init.py").write_text("raise RuntimeError('licence file missing')\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    for name in [m for m in sys.modules if m.split(".")[0] == "labdev"]:
        monkeypatch.delitem(sys.modules, name)
    yield pkg
    for name in [m for m in sys.modules if m.split(".")[0] == "labdev"]:
        del sys.modules[name]


@pytest.fixture
def entry_points(tmp_path, monkeypatch, lab):
    """An installed distribution declaring devices in the aligner.devices group (metadata only:
    importlib.metadata finds ``*.dist-info`` folders on sys.path)."""
    info = tmp_path / "lab_devices-1.2.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: lab-devices\nVersion: 1.2\n")
    (info / "entry_points.txt").write_text(
        textwrap.dedent(
            """\
            [aligner.devices]
            bench-rotator = labdev.rotator:Rotator
            bench-counter = labdev.rotator:counter
            vendor-stage = labdev.broken_dep:Stage
            half-done = labdev.rotator
            """
        )
    )
    plugins.registered.cache_clear()
    yield info
    plugins.registered.cache_clear()


def test_py_spec_opens_a_mount_and_converts_options_by_annotation(lab):
    mount = open_mount(
        "py:labdev.rotator:Rotator?port=/dev/ttyX&speed=2.5&axis=3&reversed=yes"
        "&travel=-10,20&mode=fast&calibration=cal.toml&note=hello",
        name="analyzer",
    )
    calls = sys.modules["labdev.rotator"].CALLS
    assert calls == [
        {
            "port": "/dev/ttyX",
            "name": "analyzer",  # the keyword (the bench's mount name) reaches the factory
            "speed": 2.5,
            "axis": 3,
            "reversed": True,
            "travel": (-10.0, 20.0),
            "mode": "fast",
            "calibration": __import__("pathlib").Path("cal.toml"),
            "note": "hello",  # no annotation: passed as text
        }
    ]
    assert isinstance(mount, RotationMount) and isinstance(mount, Identifies)
    mount.move_to(12.5)
    assert mount.position() == 12.5 and mount.name == "analyzer"
    assert mount.capabilities == frozenset({"home", "readback"})
    assert mount.identify() == "rotator 7"
    assert mount.temperature() == 21.5  # other attributes reach the device
    mount.close()
    assert mount.device.closed


def test_keyword_options_override_the_query_and_pass_unconverted(lab):
    open_mount("py:labdev.rotator:Rotator?port=a&speed=1", port="b", speed=7)
    assert sys.modules["labdev.rotator"].CALLS[-1]["port"] == "b"
    assert sys.modules["labdev.rotator"].CALLS[-1]["speed"] == 7


@pytest.mark.parametrize(
    ("query", "message"),
    [
        ("port=a&sped=2", "unknown option 'sped'; the factory takes: port, name, speed"),
        ("speed=2", "missing option 'port'"),
        ("port=a&speed=fast", "option speed='fast': expected a finite number"),
        ("port=a&axis=1.5", "option axis='1.5': expected a whole number"),
        ("port=a&reversed=maybe", "option reversed='maybe': expected one of 1, true"),
        ("port=a&mode=slow", "option mode='slow': expected one of fast, fine"),
        ("port=a&travel=1,2,3", "option travel='1,2,3': expected 2 comma-separated values"),
        ("port=a&&", "bad option list"),
    ],
)
def test_bad_options_are_named(lab, query, message):
    spec = f"py:labdev.rotator:Rotator?{query}"
    with pytest.raises(InputError, match=message.replace("?", r"\?")) as caught:
        open_mount(spec)
    assert str(caught.value).startswith(spec)
    with pytest.raises(InputError, match=message.replace("?", r"\?")):
        check_spec(spec)  # the same check without opening anything
    module = sys.modules.get("labdev.rotator")
    assert module is None or module.CALLS == []


def test_name_is_dropped_for_a_factory_without_one(lab):
    mount = open_mount("py:labdev.rotator:unnamed?speed=3", name="analyzer")
    assert mount.name == "rotator"
    with pytest.raises(InputError, match="unknown option 'colour'"):
        open_mount("py:labdev.rotator:unnamed", colour="red")


def test_check_spec_imports_but_opens_nothing(lab):
    assert check_spec("py:labdev.rotator:Rotator?port=/dev/ttyX&speed=3") == "py"
    assert sys.modules["labdev.rotator"].CALLS == []


@pytest.mark.parametrize(
    ("spec", "message", "cause"),
    [
        ("py:labdev.nosuch:Rotator", "no module named 'labdev.nosuch'", ModuleNotFoundError),
        ("py:nosuchpkg.mod:Rotator", "no module named 'nosuchpkg.mod'", ModuleNotFoundError),
        (
            "py:labdev.broken_dep:Stage",
            "'labdev.broken_dep' was found but failed to load: it needs 'vendor_sdk_not_installed'",
            ModuleNotFoundError,
        ),
        (
            "py:labdev.broken_init:Stage",
            "found but failed to load \\(RuntimeError: licence file missing\\)",
            RuntimeError,
        ),
        ("py:labdev.rotator:Rotater", "has no attribute 'Rotater'; did you mean 'Rotator'", None),
        ("py:labdev.rotator:NOT_CALLABLE", "is a int, not a class or function", None),
        ("py:labdev.rotator", "write py:package.module:factory", None),
        ("py:labdev rotator:X", "write py:package.module:factory", None),
    ],
)
def test_missing_module_or_factory_is_reported_clearly(lab, spec, message, cause):
    for call in (check_spec, open_mount):
        with pytest.raises(InputError, match=message) as caught:
            call(spec)
        if cause is None:
            assert caught.value.__cause__ is None
        else:  # the original exception is chained, never swallowed
            assert isinstance(caught.value.__cause__, cause)


def test_a_device_that_does_not_fit_the_role_is_refused_and_closed(lab):
    with pytest.raises(InputError, match="lacks capabilities, home, is_moving, move_to, name"):
        open_mount("py:labdev.rotator:counter")
    with pytest.raises(InputError, match="lacks channels, count of the Counter protocol"):
        open_counter("py:labdev.rotator:Rotator?port=x")
    with pytest.raises(InputError, match="counter channels must be 1 or 2, got 3"):
        open_counter("py:labdev.rotator:counter?channels=3")
    with pytest.raises(InputError, match="capabilities must be a frozenset of home"):
        open_mount("py:labdev.rotator:bad_caps")


def test_every_role_opens(lab):
    counter = open_counter("py:labdev.rotator:counter?channels=2")
    assert isinstance(counter, Counter) and counter.channels == 2
    assert counter.count(0.1) == (5, 5)
    shutter = open_shutter("py:labdev.rotator:shutter")
    assert isinstance(shutter, Shutter) and not shutter.is_open()
    pointer = open_pointer("py:labdev.rotator:pointer?value=-2")
    assert isinstance(pointer, PointerReader) and pointer.read(1.0) == (-2.0, 0.25)
    assert pointer.identify() == ""  # no identify() on the device


def test_foreign_exceptions_become_device_errors(lab):
    mount = open_mount("py:labdev.rotator:Rotator?port=x", name="analyzer")
    with pytest.raises(DeviceError, match=r"analyzer .*move_to\(\) failed .*RuntimeError") as e:
        mount.move_to(171.0)
    assert type(e.value) is DeviceError and isinstance(e.value.__cause__, RuntimeError)
    with pytest.raises(Disconnected, match="OSError"):
        mount.move_to(-171.0)
    with pytest.raises(DeviceTimeout, match="home\\(\\) failed"):
        mount.home()
    with pytest.raises(DeviceRefused, match="controller says no"):  # our own errors pass as is
        open_mount("py:labdev.rotator:refusing")
    with pytest.raises(Disconnected, match="opening the device failed"):
        open_mount("py:labdev.rotator:unreachable")


def test_entry_point_names_are_read_without_importing(entry_points):
    names = plugins.registered()
    assert names["bench-rotator"][0] == plugins.Registered(
        "bench-rotator", "labdev.rotator:Rotator", "lab-devices"
    )
    assert "labdev.rotator" not in sys.modules
    assert "labdev.broken_dep" not in sys.modules


def test_plugin_spec_opens_a_registered_device(entry_points):
    assert check_spec("plugin:bench-rotator?port=/dev/ttyY") == "plugin"
    mount = open_mount("plugin:bench-rotator?port=/dev/ttyY&speed=4", name="pre_hwp")
    assert sys.modules["labdev.rotator"].CALLS[-1]["speed"] == 4.0
    assert mount.name == "pre_hwp"
    assert open_counter("plugin:bench-counter").count(1.0) == (5,)


def test_unknown_name_is_not_a_load_failure(entry_points):
    with pytest.raises(InputError, match="no installed package registers a device named") as e:
        check_spec("plugin:bench-rotater")
    assert "did you mean 'bench-rotator'" in str(e.value)
    assert "registered: bench-counter, bench-rotator, half-done, vendor-stage" in str(e.value)
    with pytest.raises(
        InputError, match="failed to load: it needs 'vendor_sdk_not_installed'"
    ) as e:
        open_mount("plugin:vendor-stage")
    assert "of package lab-devices" in str(e.value)
    assert isinstance(e.value.__cause__, ModuleNotFoundError)
    with pytest.raises(InputError, match="names a module but no factory"):
        check_spec("plugin:half-done")


def test_a_name_registered_twice_is_refused(entry_points, tmp_path):
    other = tmp_path / "other_devices-0.1.dist-info"
    other.mkdir()
    (other / "METADATA").write_text("Metadata-Version: 2.1\nName: other-devices\nVersion: 0.1\n")
    (other / "entry_points.txt").write_text("[aligner.devices]\nbench-counter = x.y:z\n")
    plugins.registered.cache_clear()
    with pytest.raises(InputError, match=r"more than one package \(.*lab-devices.*\)"):
        open_counter("plugin:bench-counter")


def test_bench_file_validates_py_driver_specs(lab, tmp_path):
    from aligner.bench import load_bench

    text = load_bench("demo").path.read_text(encoding="utf-8")
    good = text.replace('driver = "sim"', 'driver = "py:labdev.rotator:Rotator?port=x"')
    assert parse_bench(tomllib.loads(good), "good.toml").mounts["pre_hwp"].driver.startswith("py:")
    bad = text.replace('driver = "sim"', 'driver = "py:labdev.rotator:Rotater"')
    with pytest.raises(BenchFileError, match=r"mounts\.pre_hwp\.driver: .*did you mean 'Rotator'"):
        parse_bench(tomllib.loads(bad), "bad.toml")


ADAPTERS = [
    ("aligner_drivers.adapters.binary", "BinaryMount", RotationMount),
    ("aligner_drivers.adapters.binary", "BinaryShutter", Shutter),
    ("aligner_drivers.adapters.tagger", "TaggerCounter", Counter),
    ("aligner_drivers.adapters.camera", "CameraPointer", PointerReader),
    ("aligner_drivers.adapters.epics", "MotorRecordMount", RotationMount),
    ("aligner_drivers.adapters.epics", "ScalerRecordCounter", Counter),
    ("aligner_drivers.plugins", "_GuardedMount", RotationMount),
    ("aligner_drivers.plugins", "_GuardedCounter", Counter),
    ("aligner_drivers.plugins", "_GuardedShutter", Shutter),
    ("aligner_drivers.plugins", "_GuardedPointer", PointerReader),
]


@pytest.mark.parametrize(("module", "name", "protocol"), ADAPTERS, ids=lambda v: str(v))
def test_adapter_methods_have_the_protocol_signatures(module, name, protocol):
    """Same method names and parameter names as the protocol (the engine calls by keyword)."""
    cls = getattr(importlib.import_module(module), name)
    for member, fn in vars(protocol).items():
        if member.startswith("_") or not callable(fn):
            continue
        wanted = list(inspect.signature(fn).parameters)
        assert list(inspect.signature(getattr(cls, member)).parameters) == wanted, member
    if hasattr(cls, "identify"):
        assert list(inspect.signature(cls.identify).parameters) == ["self"]
