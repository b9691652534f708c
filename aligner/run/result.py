"""What a sweep found: the pointer shift at every point against the linear and exact
predictions, the coupling strength from the whole run, the leak curve, and what the
post-selection bought against a standard measurement.

Everything is computed with the bench stored with the run (the snapshot taken when it started)
at each point's read-back readings, so a later edit of the bench file changes nothing.

* Per point: the measured pointer shift and its standard error (readout units: the bench's,
  1/units for a momentum readout), the predicted shift to first order (``g Re A_w``, or
  ``g Im A_w / (2 sigma^2)``; Jozsa, Phys. Rev. A 76, 044103 (2007)) and to all orders (the
  exact Gaussian-pointer response), the measured amplification (the shift over the coupling
  used, see :attr:`RunResult.amplification_basis`) with the linear and exact ones, and the
  measured leak against the predicted one.
* The coupling strength ``g`` from every point with a pointer reading, by maximum likelihood
  with the exact response (:func:`aligner.fit.coupling.fit_coupling`), against the linear
  formula and the bench file's value.
* What the post-selection bought (:class:`Benefit`): the run's error on ``g`` against a
  standard measurement (no post-selection, the system in the eigenstate of ``A`` with the
  largest ``|a|``, the pointer read in position) with the same source photons, the same
  detector efficiency and the same technical jitter; and against one that must attenuate the
  beam to keep the detector below its safe rate. The run's pointer variance is split into the
  shot noise of the post-selected photons (the exact post-selected spread,
  :func:`aligner.physics.branches.moments`) and the jitter; which of them dominated, and what
  capped the amplification (:func:`aligner.prediction.limits.limits`), is the limiting
  mechanism. In the shot-noise limit post-selection cannot beat the standard measurement
  (Ferrie & Combes, PRL 112, 040406 (2014)); against technical noise it can (Jordan et al.,
  PRX 4, 011031 (2014)). Cramer-Rao bounds of both, from the Fisher information of the
  detected events, are given for reference.
* The dense predicted curve over the imbalance mount's range (other mounts at their median
  read-back), for plots.

:func:`run_result` is what ``aligner log show``, ``aligner log report`` and the desk's log
screen call.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..bench import Bench
from .log import LoggedPoint, RunRecord

__all__ = [
    "Benefit",
    "CouplingEstimate",
    "Curve",
    "PointResult",
    "RunResult",
    "result_lines",
    "run_result",
    "run_result_or_reason",
    "stored_bench",
]

Real = NDArray[np.float64]

#: Points of the dense predicted curve.
CURVE_POINTS = 241
#: |measured - predicted| / error above which a point's leak counts as off the prediction.
LEAK_OFF_SIGMA = 3.0


@dataclass(frozen=True)
class PointResult:
    """One point (units in the module docstring); pointer fields are None without a pointer
    reading, leak fields None when the counts gave no leak rate (``flag`` says why)."""

    idx: int
    reading_deg: float
    imbalance_deg: float
    pointer: float | None
    pointer_err: float | None
    linear_shift: float
    exact_shift: float
    amplification: float | None
    amplification_err: float | None
    amplification_linear: float
    amplification_exact: float
    residual_sigma: float | None
    leak: float | None
    leak_low: float | None
    leak_high: float | None
    predicted_leak: float
    flag: str = ""

    def to_json(self) -> dict[str, Any]:
        """The point as JSON (``result.points[]`` in docs/json.md): ``index`` as every point
        output names it, and ``leak_sigma``."""
        doc = asdict(self)
        return {"index": doc.pop("idx"), **doc, "leak_sigma": self.leak_sigma}

    @property
    def leak_sigma(self) -> float | None:
        """(leak - predicted) over half the interval on the side of the prediction."""
        if self.leak is None or self.leak_low is None or self.leak_high is None:
            return None
        side = self.leak - self.leak_low if self.predicted_leak < self.leak else None
        error = side if side is not None else self.leak_high - self.leak
        return (self.leak - self.predicted_leak) / error if error > 0 else None


@dataclass(frozen=True)
class Curve:
    """The prediction on a dense grid of imbalance-mount readings (tuples of equal length)."""

    reading_deg: tuple[float, ...]
    imbalance_deg: tuple[float, ...]
    linear_shift: tuple[float, ...]
    exact_shift: tuple[float, ...]
    amplification_linear: tuple[float, ...]
    amplification_exact: tuple[float, ...]
    leak: tuple[float, ...]

    def to_json(self) -> dict[str, Any]:
        """The curve as JSON: one array per field."""
        return asdict(self)


@dataclass(frozen=True)
class CouplingEstimate:
    """``strength`` (g, units per unit eigenvalue) from the whole run with the exact response,
    its ``strength_err``; the linear formula's; the bench file's and the difference in
    sigma; the fit's goodness (``deviance`` for ``dof``, ``p_value``); ``statement`` and
    ``warning`` in words."""

    strength: float
    strength_err: float
    linear_strength: float
    linear_strength_err: float
    bench_strength: float
    difference_sigma: float
    deviance: float
    dof: int
    p_value: float
    points: int
    success: bool
    units: str
    statement: str
    warning: str = ""

    def to_json(self) -> dict[str, Any]:
        """The estimate as JSON, with the names of ``aligner fit coupling --json``
        (``bench_difference_sigma``, ``goodness_of_fit``, ``points_fitted``)."""
        from ..fit.likelihood import goodness_of_fit

        return {
            "strength": self.strength,
            "strength_err": self.strength_err,
            "linear_strength": self.linear_strength,
            "linear_strength_err": self.linear_strength_err,
            "bench_strength": self.bench_strength,
            "bench_difference_sigma": self.difference_sigma,
            "goodness_of_fit": goodness_of_fit(self.deviance, self.dof, self.p_value),
            "points_fitted": self.points,
            "success": self.success,
            "units": self.units,
            "statement": self.statement,
            "warning": self.warning,
        }


@dataclass(frozen=True)
class Benefit:
    """What the post-selection bought (see the module docstring). Errors on ``g`` (units of
    g): ``run_error`` from the data, ``predicted_error`` from the design (shot noise of the
    post-selected photons with the exact spread, and the jitter), ``standard_error`` with the
    same photons and jitter, ``standard_shot_error`` the same without jitter,
    ``standard_safe_error`` attenuated to the detector's safe rate (None when the detector has
    no safe rate), ``cramer_rao_post`` and ``cramer_rao_standard`` the shot-noise bounds.
    ``gain`` = standard_error / run_error (above 1: the post-selection helped) and
    ``predicted_gain`` = standard_error / predicted_error, what the design promised.
    ``source_photons`` and ``detected_post`` (expected post-selected detections) over the
    pointer points; ``shot_share`` of the run's pointer variance; ``max_amplification``
    reached (the exact prediction at the points) and the bench's ``amplification_cap`` with
    its ``cap_mechanism``; ``limited_by``
    (``shot noise``, or a mechanism of :data:`aligner.prediction.limits.MECHANISMS`, or
    ``schedule``) and ``statement`` in words."""

    source_photons: float
    detected_post: float
    run_error: float
    predicted_error: float
    standard_error: float
    standard_shot_error: float
    standard_safe_error: float | None
    cramer_rao_post: float
    cramer_rao_standard: float
    gain: float
    predicted_gain: float
    shot_share: float
    max_amplification: float
    amplification_cap: float
    cap_mechanism: str
    limited_by: str
    statement: str

    def to_json(self) -> dict[str, Any]:
        """The benefit as JSON: every field."""
        return asdict(self)


@dataclass(frozen=True)
class RunResult:
    """What run ``run`` found (see the module docstring). ``data`` is the run's data label
    (measured, SIMULATED, TYPED IN); ``bench`` says which bench was used; ``units`` of the
    pointer readings; ``amplification_basis`` which ``g`` the measured amplification divides
    by. ``coupling`` and ``benefit`` are None without pointer readings, ``leak_curve`` (a
    :class:`aligner.fit.leakcurve.LeakFit`) without four leak rates; ``notes`` say why, and
    warn where the run's bench does not describe the data."""

    run: int
    data: str
    bench: str
    units: str
    readout: str
    amplification_basis: str
    points: tuple[PointResult, ...]
    curve: Curve
    coupling: CouplingEstimate | None
    benefit: Benefit | None
    leak_curve: Any
    notes: tuple[str, ...] = field(default=())

    @property
    def headline(self) -> str:
        """One line: the coupling with its error and the post-selection's gain."""
        if self.coupling is None:
            return "no coupling estimate: " + (self.notes[0] if self.notes else "no pointer data")
        c = self.coupling
        line = f"coupling g = {c.strength:.5g} +/- {c.strength_err:.2g} {c.units}"
        if self.benefit is not None:
            line += (
                f"; {self.benefit.gain:.3g}x the precision of a standard measurement with the "
                f"same photons and jitter (limited by {self.benefit.limited_by})"
            )
        return line

    @property
    def leak_curve_line(self) -> str:
        """The leak-curve fit in words: imbalance offset, floor against the bench's, verdict."""
        fit = self.leak_curve
        if fit is None:
            why = [n for n in self.notes if n.startswith("leak curve not fitted")]
            return why[0].removeprefix("leak curve ") if why else "not fitted"
        return (
            f"{fit.imbalance_offset_deg:+.4f} +/- {fit.imbalance_offset_err_deg:.4f} deg (leak "
            f"floor {fit.leak_floor:.3g} +/- {fit.leak_floor_err:.2g}, bench predicts "
            f"{fit.predicted_floor:.3g}; {fit.verdict.text}; {fit.reference})"
        )

    def to_json(self) -> dict[str, Any]:
        """The result as one JSON document (``result`` of ``aligner log show --json``;
        ``bench_used`` says in words which bench the numbers come from)."""
        return {
            "run": self.run,
            "data": self.data,
            "bench_used": self.bench,
            "units": self.units,
            "readout": self.readout,
            "amplification_basis": self.amplification_basis,
            "headline": self.headline,
            "points": [p.to_json() for p in self.points],
            "curve": self.curve.to_json(),
            "coupling": None if self.coupling is None else self.coupling.to_json(),
            "benefit": None if self.benefit is None else self.benefit.to_json(),
            "leak_curve": None if self.leak_curve is None else self.leak_curve.to_json(),
            "notes": list(self.notes),
        }


def stored_bench(record: RunRecord) -> Bench:
    """The bench stored with a run (its file's text when the run started), validated; a text
    that no longer reads raises :class:`aligner.errors.DataFileError`."""
    import tomlkit
    from tomlkit.exceptions import TOMLKitError

    from ..bench import parse_bench
    from ..errors import DataFileError

    try:
        document = tomlkit.parse(record.bench_toml).unwrap()
    except TOMLKitError as exc:
        raise DataFileError(f"run {record.id}: its stored bench does not read ({exc})") from None
    return parse_bench(document, record.bench_path or f"run {record.id}")


def result_lines(result: RunResult) -> list[str]:
    """The result in plain lines, for a terminal, the desk or a report (the text is the
    log's and the bench's: escape it where it meets markup)."""
    lines = [f"result ({result.data}, {result.bench}): {result.headline}"]
    c, b = result.coupling, result.benefit
    if c is not None:
        lines += [
            f"coupling strength (exact response, {c.points} points): {c.strength:.5g} +/- "
            f"{c.strength_err:.2g} {c.units}; linear formula {c.linear_strength:.5g} +/- "
            f"{c.linear_strength_err:.2g}; the bench file says {c.bench_strength:.5g}",
            f"fit: deviance {c.deviance:.1f} for {c.dof} degrees of freedom (p = "
            f"{c.p_value:.3g}), {'converged' if c.success else 'FAILED'}; {c.statement}",
            f"amplification measured as the shift over {result.amplification_basis}",
        ]
    if b is not None:
        lines.append(f"what the post-selection bought: {b.statement}")
    lines.append(f"fitted imbalance offset: {result.leak_curve_line}")
    return lines + [f"note: {n}" for n in result.notes]


def _columns(bench: Bench, points: Sequence[LoggedPoint]) -> dict[str, Real]:
    """Every mount's read-back per point (the bench file's reading where a point lacks one)."""
    base = bench.readings()
    return {
        name: np.array([p.readback.get(name, base[name]) for p in points], float)
        for name in bench.mounts
    }


def _curve(bench: Bench, columns: Mapping[str, Real]) -> Curve:
    """The prediction over the imbalance mount's range, other mounts at their medians."""
    from ..prediction import predict

    name = bench.imbalance_mount
    lo, hi = float(np.min(columns[name])), float(np.max(columns[name]))
    pad = 0.05 * (hi - lo) if hi > lo else 0.5
    grid = np.linspace(lo - pad, hi + pad, CURVE_POINTS)
    others = {k: float(np.median(v)) for k, v in columns.items() if k != name}
    p = predict(bench, {**others, name: grid})
    scale = _scale(bench)
    g = bench.coupling.strength
    return Curve(
        *(
            tuple(float(x) for x in a)
            for a in (
                grid,
                p.imbalance_deg,
                g * scale * p.amplification_linear,
                p.pointer_shift,
                p.amplification_linear,
                p.amplification_exact,
                p.leak_rate,
            )
        )
    )


def _scale(bench: Bench) -> float:
    """Readout units per position-equivalent unit: 1, or 1/(2 sigma^2) for a momentum
    readout."""
    c = bench.coupling
    return 1.0 / (2 * c.pointer_sigma**2) if c.readout == "momentum" else 1.0


def _has_pointer(points: Sequence[LoggedPoint]) -> NDArray[np.bool_]:
    """Which points carry a pointer reading with a standard error."""
    return np.array([p.pointer is not None and bool(p.pointer_err) for p in points], bool)


def _coupling(
    bench: Bench, record: RunRecord, points: Sequence[LoggedPoint], columns: Mapping[str, Real]
) -> tuple[CouplingEstimate | None, str]:
    """The coupling fit over the points with a pointer reading, or None and why not."""
    from ..errors import AlignerError
    from ..fit.coupling import fit_coupling
    from ..fit.csvdata import PointerScan

    keep = _has_pointer(points)
    if keep.sum() < 2:
        why = f"{int(keep.sum())} point(s) carry a pointer reading (at least 2 are needed)"
        return None, f"no coupling estimate: {why}"
    kept = [p for p, k in zip(points, keep, strict=True) if k]
    scan = PointerScan(
        np.array([p.reading_deg for p in kept]),
        np.array([p.pointer for p in kept], float),
        np.array([p.pointer_err for p in kept], float),
        f"run {record.id}",
        record.imbalance_mount,
    )
    others = {k: v[keep] for k, v in columns.items() if k != bench.imbalance_mount}
    try:
        f = fit_coupling(bench, scan, readings=others)
    except AlignerError as exc:
        return None, f"no coupling estimate: {exc}"
    estimate = CouplingEstimate(
        strength=f.strength,
        strength_err=f.strength_err,
        linear_strength=f.linear_strength,
        linear_strength_err=f.linear_strength_err,
        bench_strength=f.bench_strength,
        difference_sigma=f.bench_difference_sigma,
        deviance=f.fit.deviance,
        dof=f.fit.dof,
        p_value=f.fit.p_value,
        points=f.fit.n_points,
        success=f.fit.success,
        units=f.units,
        statement=f"{f.statement}; {f.bench_comparison}",
        warning=f.fit.warning,
    )
    return estimate, ""


@dataclass(frozen=True)
class _Design:
    """The post-selected design at the pointer points: ``error`` on g (shot noise with the
    exact post-selected spread, and the jitter), ``shot_share`` of its variance, the
    post-selected ``share`` of the photons, the ``detected`` post-selected photons and the
    Cramer-Rao bound ``cramer_rao`` of the detected post-selected events."""

    error: float
    shot_share: float
    share: float
    detected: float
    cramer_rao: float


def _design(bench: Bench, at: Mapping[str, Real], g: float, dwell: Real) -> _Design:
    """The post-selected measurement's figures (see :class:`_Design`)."""
    from ..model import coupling_observable, forward
    from ..physics.branches import moments
    from ..physics.information import post_selected_information, readout_branches

    c, eta = bench.coupling, bench.detector.efficiency
    photons = bench.source.photon_rate * dwell
    fwd = forward(bench, at)
    a = coupling_observable(bench)
    m = moments(readout_branches(fwd.rho, fwd.effect, a, abs(g), c.pointer_sigma, c.readout))
    detected = photons * eta * m.probability
    shot = m.variance / np.maximum(detected, 1e-300)
    jitter = c.jitter_rms**2 / dwell
    info = np.maximum(m.slope**2, 1e-300) / (shot + jitter)
    f_post = post_selected_information(
        fwd.rho, fwd.effect, a, abs(g), c.pointer_sigma, c.readout
    ).total
    return _Design(
        error=float(1 / math.sqrt(info.sum())),
        shot_share=float(np.sum(info * shot / (shot + jitter)) / info.sum()),
        share=float(np.mean(m.probability)),
        detected=float(detected.sum()),
        cramer_rao=1 / math.sqrt(float(np.sum(photons * eta * f_post))),
    )


def _standard(bench: Bench, dwell: Real) -> tuple[float, float, float]:
    """The standard measurement with the same photons (same efficiency) at the same dwells:
    its error on g with the same jitter (position-equivalent, as in
    :mod:`aligner.prediction.snr`), without it, and its Cramer-Rao bound."""
    from ..model import coupling_observable
    from ..physics.information import standard_information

    c = bench.coupling
    a = coupling_observable(bench)
    a_max = float(np.max(np.abs(np.linalg.eigvalsh(a))))
    detected = bench.source.photon_rate * dwell * bench.detector.efficiency
    jitter = c.jitter_rms / _scale(bench)
    with_jitter = 1 / math.sqrt(
        float(np.sum(a_max**2 / (c.pointer_sigma**2 / detected + jitter**2 / dwell)))
    )
    shot_only = c.pointer_sigma / (a_max * math.sqrt(float(detected.sum())))
    bound = 1 / math.sqrt(float(detected.sum() * standard_information(a, c.pointer_sigma)))
    return with_jitter, shot_only, bound


def _benefit(
    bench: Bench,
    points: Sequence[LoggedPoint],
    columns: Mapping[str, Real],
    g: float,
    run_error: float,
    exact: Real,
) -> Benefit:
    """What the post-selection bought over the points with a pointer reading (module doc);
    ``exact`` is the exact amplification predicted at every point."""
    from ..prediction.limits import limits
    from ..prediction.snr import standard_snr_per_sqrt_s

    c, d = bench.coupling, bench.detector
    keep = _has_pointer(points)
    dwell = np.array([p.dwell_s for p in points])[keep]
    at = {k: v[keep] for k, v in columns.items()}
    design = _design(bench, at, g, dwell)
    standard, standard_shot, cr_standard = _standard(bench, dwell)
    medians = {k: float(np.median(v)) for k, v in at.items()}
    safe = None
    if math.isfinite(d.safe_rate):
        snr = standard_snr_per_sqrt_s(bench, medians, within_limits=True)
        safe = c.strength / (snr * math.sqrt(float(dwell.sum()))) if snr > 0 else math.inf
    cap = limits(bench, medians)
    reached = float(np.nanmax(np.abs(exact[keep])))
    gain = standard / run_error if run_error > 0 else math.nan
    limited_by, why = _limit(design.shot_share, reached, cap, design.share)
    photons = bench.source.photon_rate * float(dwell.sum())
    statement = (
        f"post-selection kept a share {design.share:.2g} of the photons "
        f"({design.detected:.3g} detected of {photons:.3g} from the source) and amplified the "
        f"shift up to {reached:.3g}x; the run's error on g, {run_error:.3g} {c.units}, is "
        f"{_times(gain)} a standard measurement's with the same photons and jitter "
        f"({standard:.3g} {c.units}); the design predicted {design.error:.3g} {c.units} "
        f"({_times(standard / design.error)} the standard). {why}"
    )
    return Benefit(
        source_photons=photons,
        detected_post=design.detected,
        run_error=run_error,
        predicted_error=design.error,
        standard_error=standard,
        standard_shot_error=standard_shot,
        standard_safe_error=safe,
        cramer_rao_post=design.cramer_rao,
        cramer_rao_standard=cr_standard,
        gain=gain,
        predicted_gain=standard / design.error,
        shot_share=design.shot_share,
        max_amplification=reached,
        amplification_cap=float(cap.max_amplification),
        cap_mechanism=cap.limited_by,
        limited_by=limited_by,
        statement=statement,
    )


def _times(gain: float) -> str:
    """``gain`` as words: "3.1x better than", "1.25x worse than"."""
    if not math.isfinite(gain):
        return "not comparable with"
    if gain >= 1:
        return f"{gain:.3g}x better than"
    return f"{1 / gain:.3g}x worse than"


def _limit(shot_share: float, reached: float, cap: Any, keep: float) -> tuple[str, str]:
    """The mechanism that limited what the post-selection bought, and why, in words."""
    if shot_share > 0.5:
        return "shot noise", (
            f"The pointer noise was {shot_share:.0%} shot noise of the post-selected photons: "
            "there post-selection cannot beat the standard measurement (Ferrie & Combes, PRL "
            f"112, 040406 (2014)): it keeps a share {keep:.2g} of the photons and amplifies "
            "the shift by about its inverse square root, a wash at best. More photons, or a "
            "noisier (technical) readout, is where it pays."
        )
    if reached < 0.5 * cap.max_amplification:
        return "schedule", (
            f"The pointer noise was {1 - shot_share:.0%} technical jitter, which the "
            f"amplification lifts the shift above; the run reached {reached:.3g}x of the "
            f"{cap.max_amplification:.3g}x the bench allows (limited there by "
            f"{cap.limited_by}): points nearer the null would have bought more."
        )
    return cap.limited_by, (
        f"The pointer noise was {1 - shot_share:.0%} technical jitter, which the amplification "
        f"lifts the shift above; the run reached {reached:.3g}x, near the bench's cap of "
        f"{cap.max_amplification:.3g}x. {cap.explanation}"
    )


def _leak_notes(points: Sequence[PointResult]) -> list[str]:
    """A warning when the measured leak is off the prediction at many points: the run's
    bench then does not describe the bench, and its weak values (so the coupling estimate)
    do not hold."""
    sigmas = [p.leak_sigma for p in points if p.leak_sigma is not None]
    off = sum(abs(s) > LEAK_OFF_SIGMA for s in sigmas)
    if not sigmas or off < max(2, len(sigmas) / 3):
        return []
    ratios = [p.leak / p.predicted_leak for p in points if p.leak and p.predicted_leak > 0]
    return [
        f"the measured leak is off the prediction by more than {LEAK_OFF_SIGMA:g} sigma at "
        f"{off} of {len(sigmas)} points (median measured/predicted {np.median(ratios):.3g}): "
        "the run's bench does not describe this bench, so its weak values, and the coupling "
        "estimate that rests on them, are not to be trusted; calibrate the null, the plates "
        "and the extinction first (aligner fit null / waveplate, or the recipes)"
    ]


def _leak_curve(bench: Bench, record: RunRecord, points: Sequence[LoggedPoint]) -> tuple[Any, str]:
    """The leak-curve fit of the run's counts (imbalance offset and floor), or None and why."""
    from ..errors import AlignerError
    from ..fit.csvdata import CountScan
    from ..fit.leakcurve import fit_leak_curve

    counted = [p for p in points if p.leak is not None]
    if len(counted) < 4:
        return None, "leak curve not fitted (fewer than 4 points with a leak rate)"
    with_reference = all(p.reference is not None for p in counted)
    scan = CountScan(
        np.array([p.reading_deg for p in counted]),
        np.array([float(p.counts) for p in counted]),
        np.array([p.dwell_s for p in counted]),
        np.array([float(p.reference or 0) for p in counted]) if with_reference else None,
        f"run {record.id}",
        record.imbalance_mount,
    )
    try:
        return fit_leak_curve(bench, scan, record.imbalance_mount), ""
    except AlignerError as exc:
        return None, f"leak curve not fitted ({exc})"


def _predicted_at(pred: Any, i: int) -> tuple[float, float, float, float, float]:
    """The prediction at point ``i``: exact shift as the sensor reads it, linear and exact
    amplification, leak, and the share of the read events that carry the shift."""
    fraction = float(pred.reading_fraction[i])
    return (
        float(pred.pointer_shift[i]) * fraction,
        float(pred.amplification_linear[i]),
        float(pred.amplification_exact[i]),
        float(pred.leak_rate[i]),
        fraction,
    )


def _point(
    p: LoggedPoint,
    imbalance: float,
    predicted: tuple[float, float, float, float, float],
    g: float,
    scale: float,
    bench: Bench,
) -> PointResult:
    """One logged point against its prediction; ``g`` is the coupling the measured
    amplification divides by, ``scale`` the readout's units per position unit. Shifts are as
    the sensor reads them (a counter-read pointer diluted by dark counts); the measured
    amplification undoes the dilution, so it compares with the weak value."""
    exact, linear, amp_exact, leak, fraction = predicted
    g = g * fraction
    shift, err = p.pointer, p.pointer_err
    measured = shift is not None and err is not None and err > 0
    return PointResult(
        idx=p.idx,
        reading_deg=p.reading_deg,
        imbalance_deg=imbalance,
        pointer=shift,
        pointer_err=err,
        linear_shift=bench.coupling.strength * scale * linear * fraction,
        exact_shift=exact,
        amplification=shift / (g * scale) if measured and shift is not None else None,
        amplification_err=abs(err / (g * scale)) if measured and err is not None else None,
        amplification_linear=linear,
        amplification_exact=amp_exact,
        residual_sigma=(shift - exact) / err if measured and shift is not None and err else None,
        leak=p.leak,
        leak_low=p.leak_lo,
        leak_high=p.leak_hi,
        predicted_leak=leak,
        flag=p.flag,
    )


def run_result(
    record: RunRecord, points: Sequence[LoggedPoint], bench: Bench | None = None
) -> RunResult:
    """What sweep run ``record`` found from its ``points`` (see the module docstring), with
    the bench stored with the run unless ``bench`` is given."""
    from ..prediction import predict

    words = (
        f"the bench stored with run {record.id} ({record.bench_name or record.bench_path})"
        if bench is None
        else f"bench {bench.path or bench.name}"
    )
    bench = bench or stored_bench(record)
    if not points:
        raise ValueError(f"run {record.id} has no points yet")
    columns = _columns(bench, points)
    pred = predict(bench, columns)
    notes: list[str] = []
    coupling, why = _coupling(bench, record, points, columns)
    if why:
        notes.append(why)
    use_fit = coupling is not None and coupling.success and coupling.strength_err > 0
    g = coupling.strength if use_fit and coupling is not None else bench.coupling.strength
    basis = (
        f"the run's fitted g = {g:.5g} {bench.coupling.units}"
        if use_fit
        else f"the bench file's coupling.strength = {g:.5g} {bench.coupling.units}"
    )
    scale = _scale(bench)
    rows = [
        _point(p, float(pred.imbalance_deg[i]), _predicted_at(pred, i), g, scale, bench)
        for i, p in enumerate(points)
    ]
    notes += _leak_notes(rows)
    if coupling is not None and coupling.warning:
        notes.append(coupling.warning)
    benefit = None
    if coupling is not None:
        exact = np.asarray(pred.amplification_exact, float)
        benefit = _benefit(bench, points, columns, g, coupling.strength_err, exact)
    leak_curve, leak_why = _leak_curve(bench, record, points)
    if leak_why:
        notes.append(leak_why)
    return RunResult(
        run=record.id,
        data=record.data_label,
        bench=words,
        units=pred.units,
        readout=bench.coupling.readout,
        amplification_basis=basis,
        points=tuple(rows),
        curve=_curve(bench, columns),
        coupling=coupling,
        benefit=benefit,
        leak_curve=leak_curve,
        notes=tuple(notes),
    )


def run_result_or_reason(
    record: RunRecord, points: Sequence[LoggedPoint]
) -> tuple[RunResult | None, str]:
    """:func:`run_result`, or None and why there is none (no points yet; a stored bench that
    no longer reads, e.g. from an older aligner): the caller shows the rest of the run."""
    from ..errors import AlignerError

    if not points:
        return None, "the run has no points yet"
    try:
        return run_result(record, points), ""
    except AlignerError as exc:
        return None, f"no result: the bench stored with the run cannot be used ({exc})"
