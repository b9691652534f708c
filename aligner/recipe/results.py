"""What recipe steps store and report: quantities with units and uncertainties, scans, and each
step's outcome. Frozen dataclasses, each with one serialiser (``to_json``) and the reader of
that document (``from_json``) that a resumed run uses.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from ..errors import RecipeError

__all__ = ["STEP_STATES", "Quantity", "Results", "ScanData", "StepOutcome", "fmt_quantity"]

#: How a step ended: ``done`` (did its work), ``passed`` / ``failed`` (a check), ``skipped``
#: (a check with nothing to compare, a recall that found no earlier run), ``refused`` (the
#: operator said no), ``stopped`` (a fault, a signal, a pause, an error: it is done again on a
#: resume).
STEP_STATES = ("done", "passed", "failed", "skipped", "refused", "stopped")


def _num(value: float | None) -> float | None:
    """A float for JSON (None for a missing or non-finite value)."""
    return float(value) if value is not None and math.isfinite(value) else None


@dataclass(frozen=True)
class Quantity:
    """A stored value with its ``unit`` (``"1"`` for a plain number), its standard error
    ``error`` and/or its 68.3 % interval ``low``..``high`` (None when not known)."""

    value: float
    unit: str = "1"
    error: float | None = None
    low: float | None = None
    high: float | None = None

    def sigma_towards(self, other: float) -> float | None:
        """The standard deviation on the side facing ``other``: the error, else the half of
        the interval on that side (None when the quantity has no uncertainty)."""
        if self.error is not None and self.error > 0:
            return self.error
        edge = self.high if other > self.value else self.low
        if edge is None:
            return None
        spread = abs(edge - self.value)
        return spread if spread > 0 else None

    def to_json(self) -> dict[str, Any]:
        """The quantity as plain data."""
        return {
            "value": _num(self.value),
            "unit": self.unit,
            "error": _num(self.error),
            "low": _num(self.low),
            "high": _num(self.high),
        }

    @classmethod
    def from_json(cls, doc: Mapping[str, Any]) -> Quantity:
        """Read :meth:`to_json`'s document."""
        value = doc.get("value")
        return cls(
            math.nan if value is None else float(value),
            str(doc.get("unit", "1")),
            doc.get("error"),
            doc.get("low"),
            doc.get("high"),
        )


def fmt_quantity(q: Quantity) -> str:
    """``135.0412 +/- 0.0031 deg``, ``0.0003969 (68 % interval 0.0003811 - 0.0004131)``:
    readings in degrees to 4 decimals, everything else to 4 significant digits."""
    unit = "" if q.unit in ("1", "") else f" {q.unit}"
    form, err_form = (".4f", ".4f") if q.unit == "deg" else (".4g", ".2g")
    if q.error is not None:
        return f"{q.value:{form}} +/- {q.error:{err_form}}{unit}"
    if q.low is not None and q.high is not None:
        return f"{q.value:{form}}{unit} (68 % interval {q.low:.4g} - {q.high:.4g})"
    return f"{q.value:{form}}{unit}"


@dataclass(frozen=True)
class ScanData:
    """Counts against the readings (deg) of ``mount``: per point the read-back, the counts,
    the reference counts (None without a reference channel) and the count time ``dwell_s``."""

    mount: str
    reading_deg: tuple[float, ...]
    counts: tuple[int, ...]
    reference: tuple[int, ...] | None
    dwell_s: tuple[float, ...]

    def count_scan(self, where: str) -> Any:
        """The scan as the fits take it (:class:`aligner.fit.csvdata.CountScan`)."""
        import numpy as np

        from ..fit.csvdata import CountScan

        ref = None if self.reference is None else np.array(self.reference, float)
        return CountScan(
            np.array(self.reading_deg, float),
            np.array(self.counts, float),
            np.array(self.dwell_s, float),
            ref,
            where,
            self.mount,
        )

    def to_json(self) -> dict[str, Any]:
        """The scan as plain data."""
        return {
            "mount": self.mount,
            "reading_deg": list(self.reading_deg),
            "counts": list(self.counts),
            "reference": None if self.reference is None else list(self.reference),
            "dwell_s": list(self.dwell_s),
        }

    @classmethod
    def from_json(cls, doc: Mapping[str, Any]) -> ScanData:
        """Read :meth:`to_json`'s document."""
        ref = doc.get("reference")
        return cls(
            str(doc["mount"]),
            tuple(float(x) for x in doc["reading_deg"]),
            tuple(int(x) for x in doc["counts"]),
            None if ref is None else tuple(int(x) for x in ref),
            tuple(float(x) for x in doc["dwell_s"]),
        )


@dataclass(frozen=True)
class StepOutcome:
    """How one step ended: its ``number`` (1 = first), kind, state (:data:`STEP_STATES`), a
    plain ``message``, the ``name`` its result is stored under, the ``quantities`` it stored,
    its ``scan`` (scans and sweeps), the mount ``readings`` of a plan or a move (deg), the
    bench ``updates`` of a fit or null search (dotted keys), the operator's ``answer``
    (confirm: "yes"/"no"; prompt: the value typed), the ``devices`` it used, the ``run`` of
    a sweep step, and its start and end (UTC)."""

    number: int
    do: str
    state: str
    message: str
    name: str = ""
    quantities: Mapping[str, Quantity] = field(default_factory=dict)
    scan: ScanData | None = None
    readings: Mapping[str, float] = field(default_factory=dict)
    updates: Mapping[str, float] = field(default_factory=dict)
    answer: str = ""
    devices: tuple[str, ...] = ()
    run: int | None = None
    started_utc: str = ""
    ended_utc: str = ""

    def to_json(self) -> dict[str, Any]:
        """The outcome as plain data (what the run log stores for the step)."""
        return {
            "number": self.number,
            "do": self.do,
            "state": self.state,
            "message": self.message,
            "name": self.name,
            "quantities": {k: q.to_json() for k, q in self.quantities.items()},
            "scan": None if self.scan is None else self.scan.to_json(),
            "readings": dict(self.readings),
            "updates": dict(self.updates),
            "answer": self.answer,
            "devices": list(self.devices),
            "run": self.run,
            "started_utc": self.started_utc,
            "ended_utc": self.ended_utc,
        }

    @classmethod
    def from_json(cls, doc: Mapping[str, Any]) -> StepOutcome:
        """Read :meth:`to_json`'s document."""
        scan = doc.get("scan")
        return cls(
            int(doc["number"]),
            str(doc["do"]),
            str(doc["state"]),
            str(doc.get("message", "")),
            str(doc.get("name", "")),
            {k: Quantity.from_json(q) for k, q in (doc.get("quantities") or {}).items()},
            None if scan is None else ScanData.from_json(scan),
            {k: float(v) for k, v in (doc.get("readings") or {}).items()},
            {k: float(v) for k, v in (doc.get("updates") or {}).items()},
            str(doc.get("answer", "")),
            tuple(doc.get("devices") or ()),
            doc.get("run"),
            str(doc.get("started_utc", "")),
            str(doc.get("ended_utc", "")),
        )


class Results:
    """The results stored so far in one recipe run, by name, each with the quantity its bare
    name stands for (a recall that found nothing stores ``None``: checks of it are skipped)."""

    def __init__(self) -> None:
        self._by_name: dict[str, tuple[StepOutcome | None, str]] = {}

    def store(self, name: str, outcome: StepOutcome | None, primary: str = "") -> None:
        """Store ``outcome`` under ``name`` (replacing an earlier one); ``primary`` is the
        quantity a bare ``name`` stands for."""
        self._by_name[name] = (outcome, primary)

    def outcome(self, name: str) -> StepOutcome | None:
        """The stored outcome of ``name`` (None for a recall that found nothing)."""
        if name not in self._by_name:
            raise RecipeError(
                f"no result named {name!r} yet (the recipe validator lets none through; was "
                "the run log edited?)"
            )
        return self._by_name[name][0]

    def quantity(self, ref: str) -> Quantity | None:
        """The quantity ``name.quantity`` (or a bare name's primary quantity); None when its
        result is a recall that found nothing."""
        name, _, wanted = ref.partition(".")
        outcome = self.outcome(name)
        if outcome is None:
            return None
        key = wanted or self._by_name[name][1]
        if key not in outcome.quantities:
            raise RecipeError(
                f"{name!r} holds no quantity {key!r} (it has {', '.join(outcome.quantities)})"
            )
        return outcome.quantities[key]
