"""Run reports: CSV export and a Markdown summary with a plot for the lab notebook.

The plot (measured leak rate with its interval against the prediction at the read-back
readings, versus the imbalance mount's reading) needs matplotlib, an optional extra:
``pip install "aligner[report]"``. Without it the Markdown is still written and says so.

Every output says what the numbers are (:attr:`RunRecord.data_label`: measured, SIMULATED,
TYPED IN) and lists the devices of the run: the CSV in comment lines above its header, the
Markdown in a table, the plot in its title. Text from the log (names, schedules, messages) is
written as data: control characters removed, Markdown's table bars escaped.
"""

from __future__ import annotations

import csv
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError
from ..text import clean
from .log import Event, LoggedPoint, RunRecord

__all__ = ["CSV_COLUMNS", "Report", "device_lines", "export_csv", "write_report"]

CSV_COLUMNS = (
    "run",
    "index",
    "mount",
    "reading_deg",
    "counts",
    "reference",
    "leak",
    "leak_lo",
    "leak_hi",
    "predicted_leak",
    "dwell_s",
    "imbalance_deg",
    "predicted_rate",
    "pointer",
    "pointer_err",
    "flag",
)
INSTALL_HINT = 'the plot needs matplotlib: pip install "aligner[report]"'


@dataclass(frozen=True)
class Report:
    """What :func:`write_report` wrote: the Markdown file, the plot (None without matplotlib)
    and a note when the plot is missing."""

    markdown: Path
    plot: Path | None
    note: str = ""


def device_lines(record: RunRecord) -> list[str]:
    """One plain line per device of the run (every session), and the run's seed and bench
    hash; a single line saying so for a run logged before devices were recorded."""
    prov = record.provenance
    sessions = [prov, *prov.get("resumed", ())]
    if not prov.get("devices"):
        return ["devices: not recorded (logged by an older aligner)"]
    lines = []
    for n, session in enumerate(sessions):
        head = "" if n == 0 else f"resumed session {n}: "
        for d in session.get("devices", ()):
            profile = (
                f", profile {d['profile']} (sha256 {str(d['profile_sha256'])[:12]})"
                if d.get("profile")
                else ""
            )
            identity = f", identifies as {d['identity']!r}" if d.get("identity") else ""
            lines.append(
                clean(
                    f"{head}{d.get('role')} {d.get('name')}: {d.get('kind')} ({d.get('spec')}, "
                    f"from {d.get('source')}){profile}{identity}"
                )
            )
        lines.append(
            f"{head}seed {session.get('seed')}, bench file sha256 "
            f"{str(session.get('bench_sha256'))[:12]}, aligner {session.get('software_version')}"
        )
    return lines


def _cell(value: float | None, fmt: str = "r") -> str:
    """A CSV cell: empty for a missing value, ``repr`` (full precision) by default."""
    if value is None:
        return ""
    return repr(value) if fmt == "r" else format(value, fmt)


def export_csv(
    record: RunRecord, points: Sequence[LoggedPoint], path: str | Path, *, overwrite: bool = False
) -> int:
    """Write a run's points as CSV (header row, :data:`CSV_COLUMNS`; ``mount`` names the
    imbalance mount whose reading ``reading_deg`` is); return the row count. Comment lines
    (``#``) above the header say what the data are and list the run's devices. Empty cells
    stand for a missing reference, pointer reading or leak rate (``flag`` says why). An
    existing file is kept unless ``overwrite``."""
    try:
        with open(path, "w" if overwrite else "x", newline="", encoding="utf-8") as handle:
            handle.write(f"# run {record.id}: {record.data_label}\n")
            handle.writelines(f"# {line}\n" for line in device_lines(record))
            writer = csv.writer(handle)
            writer.writerow(CSV_COLUMNS)
            for p in points:
                writer.writerow(
                    [
                        record.id,
                        p.idx,
                        record.imbalance_mount,
                        f"{p.reading_deg:.6f}",
                        p.counts,
                        "" if p.reference is None else p.reference,
                        _cell(p.leak),
                        _cell(p.leak_lo),
                        _cell(p.leak_hi),
                        repr(p.predicted_leak),
                        repr(p.dwell_s),
                        f"{p.imbalance_deg:.6f}",
                        repr(p.predicted_rate),
                        _cell(p.pointer),
                        _cell(p.pointer_err),
                        p.flag,
                    ]
                )
    except FileExistsError:
        raise InputError(
            f"--csv {path}: the file exists; choose another name or add --force to replace it"
        ) from None
    except OSError as exc:
        raise InputError(f"--csv {path}: cannot be written ({exc})") from None
    return len(points)


def _plot(record: RunRecord, points: Sequence[LoggedPoint], path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    measured = [p for p in points if p.leak is not None]
    x = np.array([p.reading_deg for p in measured])
    leak = np.array([p.leak for p in measured])
    err = np.array([[p.leak - p.leak_lo for p in measured], [p.leak_hi - p.leak for p in measured]])
    every = np.array([p.reading_deg for p in points])
    order = np.argsort(every)
    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    ax.errorbar(x, leak, yerr=err, fmt="o", ms=4, capsize=2, label="measured (68 % interval)")
    ax.plot(
        every[order],
        np.array([p.predicted_leak for p in points])[order],
        "-",
        label="predicted at read-back",
    )
    ax.set_xlabel(f"{record.imbalance_mount} reading (deg)")
    ax.set_ylabel("leak rate (per incident photon)")
    ax.set_yscale("log")
    ax.set_title(clean(f"run {record.id}: {record.schedule} ({record.data_label})"))
    ax.legend()
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)


def fitted_offset(record: RunRecord, points: Sequence[LoggedPoint]) -> str:
    """One line on the imbalance offset fitted to the run's counts
    (:func:`aligner.fit.leakcurve.fit_leak_curve`, reference port as intensity monitor)."""
    import numpy as np

    from ..errors import AlignerError
    from ..fit.csvdata import CountScan
    from ..fit.leakcurve import fit_leak_curve
    from .sweep import resume_plan

    if len(points) < 4:
        return "not fitted (fewer than 4 points)"
    points = [p for p in points if p.leak is not None]
    if len(points) < 4:
        return "not fitted (fewer than 4 points with a leak rate)"
    has_ref = all(p.reference for p in points)
    scan = CountScan(
        np.array([p.reading_deg for p in points]),
        np.array([float(p.counts) for p in points]),
        np.array([p.dwell_s for p in points]),
        np.array([float(p.reference) for p in points]) if has_ref else None,
        f"run {record.id}",
    )
    try:
        fit = fit_leak_curve(resume_plan(record)[0], scan, record.imbalance_mount)
    except AlignerError as exc:
        return f"not fitted ({exc})"
    return (
        f"{fit.imbalance_offset_deg:+.4f} +/- {fit.imbalance_offset_err_deg:.4f} deg "
        f"(leak floor {fit.leak_floor:.3g} +/- {fit.leak_floor_err:.2g}, bench predicts "
        f"{fit.predicted_floor:.3g}; {fit.verdict.text})"
    )


def _markdown(
    record: RunRecord,
    points: Sequence[LoggedPoint],
    events: Sequence[Event],
    plot: Path | None,
    note: str,
) -> str:
    lines = [
        _md(f"# Run {record.id}: {record.bench_name or 'bench'} ({record.data_label})"),
        "",
        _md(
            f"- status: {record.status} ({len(points)} of {record.planned} points)"
            + (f" -- {record.message}" if record.message else "")
        ),
        _md(
            f"- schedule: `{record.schedule}`, {record.repeats} pass(es), dwell "
            f"{record.dwell_s:g} s, settle {record.settle_s:g} s"
        ),
        _md(f"- bench file: {record.bench_path} (snapshot kept in the run log)"),
        f"- started {record.started_utc}, ended {record.ended_utc or '-'} (UTC)",
        f"- software: aligner {record.software_version}",
        f"- data: {record.data_label}",
        _md(f"- fitted imbalance offset: {fitted_offset(record, points)}"),
        "",
        "## Devices",
        "",
        *(_md(f"- {line}") for line in device_lines(record)),
        "",
    ]
    if plot is not None:
        lines += [f"![measured and predicted leak rate]({plot.name})", ""]
    elif note:
        lines += [f"_No plot: {note}._", ""]
    if points:
        lines += [
            "| # | reading (deg) | imbalance (deg) | counts | leak | 68 % interval "
            "| predicted | measured/predicted |",
            "|---|---|---|---|---|---|---|---|",
        ]
        for p in points:
            if p.leak is None:
                leak, interval, ratio = "-", _md(p.flag), "-"
            else:
                leak, interval = f"{p.leak:.3e}", f"{p.leak_lo:.3e} - {p.leak_hi:.3e}"
                ratio = f"{p.leak / p.predicted_leak:.3g}" if p.predicted_leak > 0 else "-"
            lines.append(
                f"| {p.idx} | {p.reading_deg:.4f} | {p.imbalance_deg:+.3f} | "
                f"{p.counts} | {leak} | {interval} | {p.predicted_leak:.3e} | {ratio} |"
            )
        lines.append("")
    if events:
        lines += ["## Events", ""]
        lines += [
            _md(
                f"- {e.t_utc} {e.kind}"
                + (f" (point {e.idx})" if e.idx is not None else "")
                + f": {e.message}"
            )
            for e in events
        ]
        lines.append("")
    lines += [
        "Laser safety: follow your local laser-safety rules and your laser safety officer.",
        "",
    ]
    return "\n".join(lines)


def _md(text: str) -> str:
    """Log text for a Markdown line: control characters removed, table bars escaped."""
    return clean(text).replace("|", "\\|").replace("\n", " ")


def write_report(
    record: RunRecord, points: Sequence[LoggedPoint], events: Sequence[Event], out_dir: str | Path
) -> Report:
    """Write ``run-<id>.md`` and ``run-<id>-leak.svg`` into ``out_dir`` (created)."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create the folder ({exc})") from None
    plot: Path | None = out / f"run-{record.id}-leak.svg"
    note = ""
    if not points:
        plot, note = None, "the run has no points yet"
    else:
        try:
            _plot(record, points, plot)  # type: ignore[arg-type]
        except ImportError:
            plot, note = None, INSTALL_HINT
    markdown = out / f"run-{record.id}.md"
    markdown.write_text(_markdown(record, points, events, plot, note), encoding="utf-8")
    return Report(markdown, plot, note)
