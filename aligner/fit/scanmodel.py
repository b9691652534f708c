"""The forward count model shared by the scan fits, and modified benches for fit parameters.

Expected counts at a mount reading: the bench's photon rate times the exact post-selection
probability (:func:`aligner.physics.weak.pointer_response`, pointer overlap included) through
the detector model of :func:`aligner.physics.detection.expected_rates` (efficiency, dark counts,
dead time, pulsed clicks), times the dwell. Fit parameters enter as *arrays* of shape
``(m, 1)`` placed in the bench with :func:`dataclasses.replace`, so one forward call evaluates
``m`` parameter vectors on all ``n`` readings at once.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench, Element
from ..errors import InputError
from ..model import coupling_observable, forward
from ..nulls import null_in_window
from ..physics.weak import pointer_response
from .csvdata import CountScan, PointerScan

__all__ = [
    "detected_rate",
    "dwell_per_point",
    "mount_statement",
    "null_reading_deg",
    "plate_element",
    "post_probability",
    "reference_weights",
    "require_mount",
    "with_analyzer_extinction",
    "with_offset",
    "with_retardance",
]

Real = NDArray[np.float64]


def _file_mount(bench: Bench, scan: CountScan | PointerScan | None) -> tuple[str | None, str]:
    """The mount a scan file says its readings are of, and why (``""`` when it says nothing)."""
    if scan is None:
        return None, ""
    if scan.mount:
        return scan.mount, "the file's mount column"
    if scan.run_export:
        return bench.imbalance_mount, (
            "a run export without a mount column: readings of the "
            "run's imbalance mount, taken to be this bench's "
            "imbalance_mount"
        )
    return None, ""


def require_mount(
    bench: Bench,
    mount: str | None,
    default: str | None,
    what: str,
    scan: CountScan | PointerScan | None = None,
) -> str:
    """The mount a scan was taken with (``--mount``, else ``default``), checked against the
    bench and against the mount the scan file names (a mismatch is refused)."""
    file_mount, why = _file_mount(bench, scan)
    name = mount or default or file_mount
    if name is None:
        raise InputError(
            f"say which mount the {what} scan turned (--mount; the bench has: "
            f"{', '.join(bench.mounts)})"
        )
    if name not in bench.mounts:
        raise InputError(
            f"--mount {name!r}: no such mount; the bench has: {', '.join(bench.mounts)}"
        )
    if file_mount is not None and name != file_mount:
        asked = f"--mount {name!r}" if mount else f"{name!r} (the {what} fit's default mount)"
        raise InputError(
            f"{scan.path}: the readings are of mount {file_mount!r} ({why}), but "
            f"the {what} fit was asked for {asked}; fit a scan of {name!r}, or "
            f"give --mount {file_mount} if that mount is the one to fit"
        )
    return name


def mount_statement(
    bench: Bench, scan: CountScan | PointerScan, mount: str | None, name: str
) -> str:
    """In words, which mount the readings of ``scan`` were taken to belong to and why
    (``mount`` is what ``--mount`` gave, ``name`` the mount fitted)."""
    file_mount, why = _file_mount(bench, scan)
    if file_mount is not None:
        return f"readings of mount {name!r} ({why})"
    if mount:
        return f"readings taken to belong to mount {name!r} (--mount; the file does not say)"
    return (
        f"readings taken to belong to mount {name!r} (the default for this fit; the file "
        "does not say: give --mount if the scan turned another mount)"
    )


def post_probability(bench: Bench, readings: dict[str, ArrayLike]) -> Real:
    """Exact post-selection probability per source photon (pointer overlap included)."""
    fwd = forward(bench, readings)
    c = bench.coupling
    return pointer_response(
        fwd.rho, fwd.effect, coupling_observable(bench), c.strength, c.pointer_sigma
    ).probability


def detected_rate(
    bench: Bench,
    readings: dict[str, ArrayLike],
    photon_rate: ArrayLike,
    dark_rate: float | None = None,
) -> Real:
    """Measured count rate (counts/s) at ``readings`` for a source ``photon_rate`` (photons/s);
    ``dark_rate`` (counts/s) overrides the bench detector's."""
    return bench.detector.expected_rates(
        photon_rate, post_probability(bench, readings), dark_rate=dark_rate
    ).measured_rate


def dwell_per_point(scan: CountScan, dwell_s: float | None) -> Real:
    """Gate time (s) of every point: the file's ``dwell_s`` column, else ``dwell_s``."""
    if scan.dwell_s is not None:
        return scan.dwell_s
    if dwell_s is None or not dwell_s > 0:
        raise InputError(
            f"{scan.path}: the file has no dwell_s column; give the gate time with --dwell SECONDS"
        )
    return np.full(scan.counts.shape, float(dwell_s))


def reference_weights(scan: CountScan) -> Real:
    """Relative source intensity per point from the ``reference`` column (mean 1), else 1."""
    if scan.reference is None:
        return np.ones_like(scan.counts)
    mean = float(np.mean(scan.reference))
    if mean <= 0:
        raise InputError(
            f"{scan.path}: the reference column is all zero; it must hold the "
            "counts of a reference port or monitor"
        )
    return scan.reference / mean


def with_offset(bench: Bench, mount: str, offset_deg: ArrayLike) -> Bench:
    """The bench with mount ``mount``'s offset (deg) replaced."""
    return bench.with_mounts(**{mount: replace(bench.mounts[mount], offset_deg=offset_deg)})


def with_analyzer_extinction(bench: Bench, extinction_ratio: ArrayLike) -> Bench:
    """The bench with the analyzer's extinction ratio replaced."""
    return replace(bench, analyzer=replace(bench.analyzer, extinction_ratio=extinction_ratio))


def plate_element(bench: Bench, mount: str) -> Element:
    """The retarder held by ``mount`` (error if the mount holds none)."""
    for element in (*bench.pre, *bench.post):
        if element.mount == mount and element.type in ("hwp", "qwp", "retarder"):
            return element
    raise InputError(
        f"--mount {mount!r} holds no waveplate; a waveplate fit needs the mount "
        "of an hwp, qwp or retarder"
    )


def with_retardance(bench: Bench, mount: str, waves: ArrayLike) -> Bench:
    """The bench with the retardance (waves) of the plate on ``mount`` replaced."""

    def swap(chain: tuple[Element, ...]) -> tuple[Element, ...]:
        return tuple(
            replace(e, retardance_waves=waves)
            if e.mount == mount and e.type in ("hwp", "qwp", "retarder")
            else e
            for e in chain
        )

    return replace(bench, pre=swap(bench.pre), post=swap(bench.post))


def null_reading_deg(bench: Bench, mount: str, near_deg: float, span_deg: float = 5.0) -> float:
    """Reading of ``mount`` (deg) at the null (:mod:`aligner.nulls`: pre- and post-selection
    crossed) nearest ``near_deg`` within ``near_deg +/- span_deg``; the closest approach when
    that window holds no null."""
    return null_in_window(bench, mount, near_deg, span_deg)
