"""The camera pointer on synthetic frames with a known spot centre: bias, error bars (coverage
by simulation with fixed seeds), region of interest, units, folder mode, faults."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
from scipy import stats
from scipy.special import erf

from aligner.errors import BadReply, DeviceError, DeviceTimeout, InputError
from aligner_drivers.adapters.camera import CameraPointer, FolderFrames, load_image
from aligner_drivers.open import open_pointer
from aligner_drivers.protocols import PointerReader

W, H = 48, 40  # frame size (pixels)
X0, Y0, SIGMA = 21.3, 17.8, 2.5  # true spot centre and rms radius (pixels)
PEDESTAL, READ_NOISE = 100.0, 4.0  # counts
THRESHOLD = 5 * READ_NOISE


def spot(x0=X0, y0=Y0, photons=20000.0, width=W, height=H):
    """Mean counts of a Gaussian spot integrated over each pixel (pixel j spans j +- 1/2)."""
    ex, ey = np.arange(width + 1) - 0.5, np.arange(height + 1) - 0.5
    px = np.diff(0.5 * erf((ex - x0) / (np.sqrt(2) * SIGMA)))
    py = np.diff(0.5 * erf((ey - y0) / (np.sqrt(2) * SIGMA)))
    return photons * np.outer(py, px)


def camera(seed, jitter_px=0.05, x0=X0, y0=Y0, dark=False):
    """grab(): shot noise, read noise, a pedestal and a beam that jitters from frame to frame."""
    rng = np.random.default_rng(seed)

    def grab():
        dx, dy = rng.normal(0.0, jitter_px, 2)
        light = 0.0 if dark else rng.poisson(spot(x0 + dx, y0 + dy))
        return light + PEDESTAL + rng.normal(0.0, READ_NOISE, (H, W))

    return grab


@pytest.mark.parametrize(("method", "reads"), [("centroid", 300), ("gaussian", 60)])
def test_bias_and_error_bar_coverage(method, reads):
    """Each read averages N = 8 frames; its mean +- standard error covers the true centre with
    probability P(|t_7| <= 1) = 0.649 (Student, Biometrika 6, 1 (1908); scipy.stats.t), and the
    means scatter about the truth without bias."""
    cam = CameraPointer(
        camera(seed=3),
        method=method,
        background=np.full((H, W), PEDESTAL),
        threshold=THRESHOLD,
        frame_time_s=0.1,
    )
    results = np.array([cam.read(0.8) for _ in range(reads)])
    means, errors = results[:, 0], results[:, 1]
    spread = means.std(ddof=1) / np.sqrt(reads)
    assert abs(means.mean() - X0) < 4 * spread  # no bias beyond the Monte Carlo spread
    assert abs(means.mean() - X0) < 0.2 * errors.mean()  # and far below one error bar
    covered = int(np.sum(np.abs(means - X0) <= errors))
    expected = 2 * stats.t.cdf(1.0, 7) - 1
    assert stats.binomtest(covered, reads, expected).pvalue > 1e-3
    # the error bar has the scale of the true scatter of the means
    assert 0.8 < np.sqrt(np.mean(errors**2)) / means.std(ddof=1) < 1.25


def test_without_a_threshold_the_noise_floor_pulls_the_centroid():
    """Why the threshold exists: the clipped noise floor is an even pedestal over the region,
    so the centroid moves towards the region's middle (x = 23.5 here) by a large fraction of a
    pixel (common practice, no source)."""
    cam = CameraPointer(camera(seed=4), background=np.full((H, W), PEDESTAL), frame_time_s=0.1)
    mean, _ = cam.read(1.0)
    assert mean - X0 > 0.1


def test_region_of_interest_units_and_axis():
    """A second spot outside the region does not matter; readings are scale * (centre - origin)
    in whole-frame pixels."""
    rng = np.random.default_rng(5)
    other = spot(x0=40.0, y0=5.0)

    def grab():
        return rng.poisson(spot() + other) + rng.normal(0.0, READ_NOISE, (H, W))

    common = {"roi": (10, 8, 24, 22), "threshold": THRESHOLD, "frame_time_s": 0.1}
    x = CameraPointer(grab, scale=5.5, origin_px=20.0, **common)
    mean, sem = x.read(1.0)
    assert mean == pytest.approx(5.5 * (X0 - 20.0), abs=5 * sem + 1e-3)
    y = CameraPointer(grab, axis="y", scale=-2.0, method="gaussian", **common)
    mean, sem = y.read(0.5)
    assert mean == pytest.approx(-2.0 * Y0, abs=5 * sem + 1e-3)
    assert x.centre_px(spot()) == pytest.approx((X0, Y0), abs=0.01)
    unclipped = CameraPointer(grab, threshold=THRESHOLD)
    assert unclipped.centre_px(spot() + other)[0] > X0 + 5  # without the roi both spots count


def test_background_from_dark_frames():
    rng_gain = np.random.default_rng(9).uniform(50.0, 150.0, (H, W))  # fixed-pattern offsets
    dark = camera(seed=6, dark=True)
    light = camera(seed=7)
    state = {"beam": False}
    cam = CameraPointer(
        lambda: (light() if state["beam"] else dark()) + rng_gain,
        threshold=THRESHOLD,
        frame_time_s=0.1,
    )
    background = cam.take_background(frames=20)
    assert background.shape == (H, W)
    assert np.abs(background - rng_gain - PEDESTAL).max() < 5 * READ_NOISE
    state["beam"] = True
    mean, sem = cam.read(1.0)
    assert abs(mean - X0) < 5 * sem


def test_the_pointer_protocol_and_a_py_spec(tmp_path):
    np.save(tmp_path / "dark.npy", np.full((H, W), PEDESTAL))
    cam = open_pointer(
        "py:aligner_drivers.adapters.camera:CameraPointer"
        f"?background={tmp_path / 'dark.npy'}&threshold=20&method=gaussian&roi=5,5,35,30"
        "&scale=0.5&frame_time_s=0.25",
        grab=camera(seed=8),
        name="beam-camera",
    )
    assert isinstance(cam, PointerReader) and cam.name == "beam-camera"
    assert cam.device.roi == (5, 5, 35, 30) and cam.device.method == "gaussian"
    mean, sem = cam.read(1.0)  # 4 frames
    assert abs(mean - 0.5 * X0) < 5 * sem


def _write_later(folder, frames, delay_s=0.05):
    def run():
        for i, frame in enumerate(frames):
            time.sleep(delay_s)
            np.save(folder / f"frame-{i:04d}.npy", frame)

    thread = threading.Thread(target=run)
    thread.start()
    return thread


def test_folder_mode_reads_new_files_in_order(tmp_path):
    np.save(tmp_path / "old.npy", np.zeros((H, W)))  # there before: skipped
    (tmp_path / "notes.txt").write_text("not an image")
    shifts = [0.0, 1.0, 2.0, 3.0]
    writer = _write_later(tmp_path, [spot(x0=X0 + s) for s in shifts])
    frames = FolderFrames(tmp_path, wait_s=5.0, poll_s=0.01)
    got = [frames() for _ in shifts]
    writer.join()
    cam = CameraPointer(lambda: 0, frame_time_s=1.0)
    assert [cam.centre_px(f)[0] - X0 for f in got] == pytest.approx(shifts, abs=1e-6)
    with pytest.raises(DeviceTimeout, match="no new image matching '\\*' in"):
        FolderFrames(tmp_path, wait_s=0.05, poll_s=0.01)()


def test_folder_mode_from_a_spec(tmp_path):
    writer = _write_later(tmp_path, [spot(x0=X0 + s) for s in (-0.5, 0.5)], delay_s=0.02)
    cam = open_pointer(
        f"py:aligner_drivers.adapters.camera:CameraPointer?folder={tmp_path}&wait_s=5"
        "&frame_time_s=0.5"
    )
    mean, sem = cam.read(1.0)
    writer.join()
    assert mean == pytest.approx(X0, abs=1e-6) and sem == pytest.approx(0.5, abs=1e-6)


def test_plain_image_files_through_pillow(tmp_path):
    image_module = pytest.importorskip("PIL.Image")
    counts = np.round(spot(photons=60000.0)).astype(np.uint16)
    image_module.fromarray(counts).save(tmp_path / "frame.png")
    image_module.fromarray(np.stack([counts.astype(np.uint8)] * 3, axis=2)).save(
        tmp_path / "rgb.tif"
    )
    assert np.array_equal(load_image(tmp_path / "frame.png"), counts)
    assert load_image(tmp_path / "rgb.tif").shape == (H, W)
    cam = CameraPointer(lambda: load_image(tmp_path / "frame.png"), frame_time_s=0.5)
    assert cam.read(1.0)[0] == pytest.approx(X0, abs=0.01)


@pytest.mark.parametrize(
    ("grab", "error", "message"),
    [
        (lambda: np.zeros(5), BadReply, "2-D array"),
        (lambda: np.zeros((H, W)), BadReply, "no light above threshold"),
        (lambda: np.full((H, W + 1), 1.0), BadReply, "differs from the background"),
        (lambda: 1 / 0, DeviceError, "grab\\(\\) failed"),
    ],
)
def test_bad_frames_are_device_errors(grab, error, message):
    cam = CameraPointer(grab, background=np.zeros((H, W)), frame_time_s=0.5)
    with pytest.raises(error, match=message):
        cam.read(1.0)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({}, "give either grab"),
        ({"grab": list, "folder": "."}, "give either grab"),
        ({"grab": list, "roi": (0, 0, 2, 40)}, "roi must be x,y,width,height"),
        ({"grab": list, "scale": 0.0}, "scale must be a finite non-zero"),
        ({"grab": list, "axis": "z"}, "axis must be x or y"),
        ({"folder": "/no/such/folder"}, "does not exist"),
        ({"grab": list, "background": "dark.csv"}, "not an image file"),
    ],
)
def test_bad_settings_are_refused(kwargs, message):
    with pytest.raises(InputError, match=message):
        CameraPointer(**kwargs)
    with pytest.raises(InputError, match="reaches beyond"):
        CameraPointer(list, roi=(40, 0, 20, 20)).centre_px(np.ones((H, W)))
