"""A pointer reader from camera frames: the spot's centre by centroid or 2-D Gaussian fit.

Frames come from either

- ``grab``: any callable ``grab() -> 2-D array`` that returns the next frame (rows = image y,
  columns = image x; any numeric dtype), blocking until it has one, e.g. a camera library's
  acquisition method; or
- ``folder``: image files a camera program writes into a folder (:class:`FolderFrames`), read
  as they appear: ``.npy`` always, ``.png``, ``.tif``/``.tiff``, ``.bmp`` and ``.pgm`` through
  Pillow (``pip install "aligner[camera]"``).

Each frame is processed as float64: the ``background`` frame (an array, a file, or the mean of
dark frames from :meth:`CameraPointer.take_background`) is subtracted, the region of interest
``roi = (x, y, width, height)`` (pixels) is cut out, and the spot centre is found

- ``method="centroid"``: intensity-weighted mean position, after pixels below ``threshold``
  (counts, after the background) are set to 0; a threshold a few read-noise widths up keeps
  the noise floor from pulling the centroid towards the middle of the region;
- ``method="gaussian"``: least-squares fit (``scipy.optimize.curve_fit``) of an axis-aligned
  2-D Gaussian with a constant offset, started from the centroid and second moments
  (``threshold`` is not used).

Pixel coordinates: the centre of the first pixel is (0, 0); ``x`` grows along a row, ``y``
down the columns; a region's centres are reported in whole-frame coordinates.

Pointer units: ``reading = scale * (centre[axis] - origin_px)``, where ``scale`` is pointer
units per pixel: the pixel pitch divided by the imaging magnification in the units the bench's
pointer uses (e.g. 5.5 um pitch at magnification 1 and a pointer in um: ``scale = 5.5``).

``read(dwell_s)`` takes ``N = max(2, round(dwell_s / frame_time_s))`` frames and returns the
mean reading and its standard error (sample standard deviation of the N readings over
``sqrt(N)``, so the error bar includes frame-to-frame beam jitter).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from pathlib import Path
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from aligner.errors import BadReply, DeviceTimeout, Disconnected, InputError

from .._checks import check_dwell
from ..plugins import guarded_call

__all__ = ["IMAGE_SUFFIXES", "CameraPointer", "FolderFrames", "load_image"]

#: file suffixes read as frames (.npy by numpy, the rest by Pillow)
IMAGE_SUFFIXES = (".npy", ".png", ".tif", ".tiff", ".bmp", ".pgm")
Frame = NDArray[np.float64]


def load_image(path: str | Path) -> Frame:
    """One frame from an image file, as a 2-D float array (colour images: mean of the bands).
    ``.npy`` needs only numpy; the other formats need Pillow."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in IMAGE_SUFFIXES:
        raise InputError(f"{path}: not an image file; allowed: {', '.join(IMAGE_SUFFIXES)}")
    if suffix == ".npy":
        data = np.load(path, allow_pickle=False)
    else:
        try:
            from PIL import Image
        except ImportError as exc:
            raise InputError(
                f'{path}: reading {suffix} images needs Pillow: pip install "aligner[camera]" '
                "(or save .npy files)"
            ) from exc
        with Image.open(path) as image:
            data = np.asarray(image)
    frame = np.asarray(data, dtype=float)
    if frame.ndim == 3:
        frame = frame.mean(axis=2)
    if frame.ndim != 2 or frame.size == 0:
        raise BadReply(f"{path}: expected a 2-D image, got an array of shape {frame.shape}")
    return frame


class FolderFrames:
    """A ``grab()`` callable for images a camera program writes into ``folder``.

    Each call returns the next new file matching ``pattern`` with an image suffix, oldest
    first (modification time, then name), once its size has stopped changing for one poll
    (``poll_s``); it waits up to ``wait_s`` for one, then raises ``DeviceTimeout``. Files
    present when it is made are skipped unless ``include_existing``.
    """

    def __init__(
        self,
        folder: str | Path,
        pattern: str = "*",
        *,
        wait_s: float = 10.0,
        poll_s: float = 0.05,
        include_existing: bool = False,
    ) -> None:
        self.folder = Path(folder)
        if not self.folder.is_dir():
            raise InputError(f"folder {str(self.folder)!r} does not exist or is not a folder")
        self.pattern = pattern
        self.wait_s = wait_s
        self.poll_s = poll_s
        self._seen: set[str] = set() if include_existing else {p.name for p in self._files()}
        self._sizes: dict[str, int] = {}

    def _files(self) -> list[Path]:
        found = [p for p in self.folder.glob(self.pattern) if p.suffix.lower() in IMAGE_SUFFIXES]
        stamped = []
        for p in found:
            try:
                stamped.append((p.stat().st_mtime_ns, p.name, p))
            except FileNotFoundError:  # removed between glob and stat
                continue
        return [p for _, _, p in sorted(stamped)]

    def _ready(self) -> Path | None:
        """The oldest new file whose size held still since the previous poll."""
        for path in self._files():
            if path.name in self._seen:
                continue
            size = path.stat().st_size
            previous = self._sizes.get(path.name)
            self._sizes[path.name] = size
            if size > 0 and size == previous:
                return path
            return None  # in order: wait for this one
        return None

    def __call__(self) -> Frame:
        """The next new frame (see the class docstring)."""
        deadline = time.monotonic() + self.wait_s
        failure: Exception | None = None
        while time.monotonic() < deadline:
            path = self._ready()
            if path is not None:
                try:
                    frame = load_image(path)
                except (OSError, ValueError, BadReply) as exc:  # still being written: try again
                    failure = exc
                else:
                    self._seen.add(path.name)
                    self._sizes.pop(path.name, None)
                    return frame
            time.sleep(self.poll_s)
        if failure is not None:
            raise BadReply(f"{self.folder}: a new image could not be read ({failure})")
        raise DeviceTimeout(
            f"no new image matching {self.pattern!r} in {self.folder} within {self.wait_s:g} s; "
            "check that the camera program is running and saving into that folder"
        )


def _gaussian(
    coords: tuple[Frame, Frame],
    amp: float,
    x0: float,
    y0: float,
    sx: float,
    sy: float,
    offset: float,
) -> Frame:
    x, y = coords
    return amp * np.exp(-0.5 * (((x - x0) / sx) ** 2 + ((y - y0) / sy) ** 2)) + offset


class CameraPointer:
    """A ``PointerReader`` from camera frames (module docstring for every option).

    Give exactly one of ``grab`` (a callable) and ``folder``. ``axis``: which image direction
    is the pointer (``x`` or ``y``); ``scale``: pointer units per pixel; ``origin_px``: the
    pixel coordinate that reads 0; ``frame_time_s``: time one frame takes (s), which sets how
    many frames a dwell averages; ``pattern`` and ``wait_s`` apply to ``folder``.
    """

    def __init__(
        self,
        grab: Callable[[], ArrayLike] | None = None,
        *,
        folder: Path | None = None,
        pattern: str = "*",
        wait_s: float = 10.0,
        axis: Literal["x", "y"] = "x",
        scale: float = 1.0,
        origin_px: float = 0.0,
        method: Literal["centroid", "gaussian"] = "centroid",
        roi: tuple[int, int, int, int] | None = None,
        background: ArrayLike | str | Path | None = None,
        threshold: float = 0.0,
        frame_time_s: float = 0.1,
        name: str = "camera",
    ) -> None:
        self.name = name
        source = FolderFrames(folder, pattern, wait_s=wait_s) if folder is not None else grab
        if source is None or (grab is not None and folder is not None):
            raise InputError(f"{name}: give either grab (a callable) or folder, not both or none")
        if axis not in ("x", "y") or method not in ("centroid", "gaussian"):
            raise InputError(
                f"{name}: axis must be x or y and method centroid or gaussian, got "
                f"{axis!r}, {method!r}"
            )
        if not (math.isfinite(scale) and scale != 0.0):
            raise InputError(f"{name}: scale must be a finite non-zero number, got {scale!r}")
        if not (math.isfinite(frame_time_s) and frame_time_s > 0.0):
            raise InputError(f"{name}: frame_time_s must be > 0 s, got {frame_time_s!r}")
        if roi is not None and (len(roi) != 4 or min(roi) < 0 or min(roi[2:]) < 3):
            raise InputError(
                f"{name}: roi must be x,y,width,height in pixels (>= 0, at least 3 x 3), "
                f"got {roi!r}"
            )
        self.grab: Callable[[], ArrayLike] = source
        self.axis, self.method = axis, method
        self.scale, self.origin_px = float(scale), float(origin_px)
        self.roi = roi
        self.threshold = float(threshold)
        self.frame_time_s = float(frame_time_s)
        if isinstance(background, str | Path):
            background = load_image(background)
        self.background: Frame | None = (
            None if background is None else np.asarray(background, dtype=float)
        )
        if self.background is not None and self.background.ndim not in (0, 2):
            raise InputError(f"{name}: background must be a number or a 2-D frame")
        self._closed = False

    # -- frames ----------------------------------------------------------------------------

    def _grab(self) -> Frame:
        if self._closed:
            raise Disconnected(f"{self.name}: the camera was closed; open it again")
        raw = guarded_call(self.name, "grab()", self.grab)
        try:
            frame = np.asarray(raw, dtype=float)
        except (TypeError, ValueError):
            frame = np.empty(0)
        if frame.ndim != 2 or frame.size == 0 or not np.all(np.isfinite(frame)):
            raise BadReply(
                f"{self.name}: grab() must return a 2-D array of finite pixel values, got "
                f"{type(raw).__name__} of shape {np.shape(frame)}"
            )
        return frame

    def _prepare(self, frame: Frame) -> tuple[Frame, int, int]:
        """Background removed and region cut out; returns (region, x offset, y offset)."""
        if self.background is not None:
            if self.background.ndim == 2 and self.background.shape != frame.shape:
                raise BadReply(
                    f"{self.name}: frame shape {frame.shape} differs from the background's "
                    f"{self.background.shape}; take the background again"
                )
            frame = frame - self.background
        if self.roi is None:
            return frame, 0, 0
        x, y, w, h = self.roi
        region = frame[y : y + h, x : x + w]
        if region.shape != (h, w):
            raise InputError(
                f"{self.name}: roi {self.roi} reaches beyond the {frame.shape[1]} x "
                f"{frame.shape[0]} frame"
            )
        return region, x, y

    def take_background(self, frames: int = 10) -> Frame:
        """Average ``frames`` frames as the background (block the beam first) and keep it."""
        dark = [self._grab() for _ in range(max(1, frames))]
        if any(f.shape != dark[0].shape for f in dark):
            raise BadReply(f"{self.name}: the dark frames differ in shape; check the camera")
        self.background = np.mean(dark, axis=0)
        return self.background

    # -- centres ---------------------------------------------------------------------------

    def _weighted_mean(self, weights: Frame) -> tuple[float, float, float]:
        """(x, y, total) of non-negative pixel weights; ``BadReply`` when there is no light."""
        total = float(weights.sum())
        if not total > 0.0:
            raise BadReply(
                f"{self.name}: no light above threshold {self.threshold:g} in the region of "
                "interest; check the beam, the exposure, the roi and the background"
            )
        h, w = weights.shape
        x = float(weights.sum(axis=0) @ np.arange(w) / total)
        y = float(weights.sum(axis=1) @ np.arange(h) / total)
        return x, y, total

    def _centroid(self, region: Frame) -> tuple[float, float]:
        x, y, _ = self._weighted_mean(np.where(region >= self.threshold, region, 0.0))
        return x, y

    def _fit(self, region: Frame) -> tuple[float, float]:
        from scipy.optimize import curve_fit

        h, w = region.shape
        weights = np.clip(region - np.median(region), 0.0, None)
        x0, y0, total = self._weighted_mean(weights)
        yy, xx = np.mgrid[0:h, 0:w].astype(float)
        sx = math.sqrt(max(float((weights * (xx - x0) ** 2).sum() / total), 0.25))
        sy = math.sqrt(max(float((weights * (yy - y0) ** 2).sum() / total), 0.25))
        start = (float(region.max() - np.median(region)), x0, y0, sx, sy, float(np.median(region)))
        try:
            params, _ = curve_fit(
                lambda c, *p: _gaussian(c, *p).ravel(), (xx, yy), region.ravel(), p0=start
            )
        except (RuntimeError, ValueError) as exc:
            raise BadReply(
                f"{self.name}: the Gaussian fit did not converge ({exc}); check the roi and the "
                "exposure, or use method=centroid"
            ) from None
        fx, fy = float(params[1]), float(params[2])
        if not (-0.5 <= fx <= w - 0.5 and -0.5 <= fy <= h - 0.5):
            raise BadReply(
                f"{self.name}: the Gaussian fit put the spot outside the region of interest "
                f"({fx:.1f}, {fy:.1f}); check the roi and the exposure"
            )
        return fx, fy

    def centre_px(self, frame: ArrayLike) -> tuple[float, float]:
        """The spot centre (x, y) of one raw frame in whole-frame pixel coordinates."""
        region, dx, dy = self._prepare(np.asarray(frame, dtype=float))
        x, y = self._fit(region) if self.method == "gaussian" else self._centroid(region)
        return x + dx, y + dy

    # -- PointerReader ---------------------------------------------------------------------

    def read(self, dwell_s: float) -> tuple[float, float]:
        """Mean reading over the dwell's frames and its standard error (pointer units)."""
        frames = max(2, round(check_dwell(dwell_s) / self.frame_time_s))
        index = 0 if self.axis == "x" else 1
        centres = np.array([self.centre_px(self._grab())[index] for _ in range(frames)])
        readings = self.scale * (centres - self.origin_px)
        return float(readings.mean()), float(readings.std(ddof=1) / math.sqrt(frames))

    def close(self) -> None:
        """Stop reading frames (the camera or its program is left as it is)."""
        self._closed = True
