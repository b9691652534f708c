"""Run reports: CSV export and a Markdown summary with plots for the lab notebook.

The summary leads with the result (:mod:`aligner.run.result`): the coupling strength from the
whole run with its error, what the post-selection bought against a standard measurement and
what limited it, the leak-curve fit, then every point's pointer shift and amplification next
to the linear and exact predictions, and its leak rate.

The plot (one SVG, three panels against the imbalance: pointer shift, amplification, leak rate
on a log axis; measured points with their errors over the dense predicted curves) needs
matplotlib, an optional extra: ``pip install "aligner[report]"``. It is drawn on a figure of
its own with the SVG canvas (no pyplot state, nothing shown). Without matplotlib the Markdown
is still written and says so.

Every output says what the numbers are (:attr:`RunRecord.data_label`: measured, SIMULATED,
TYPED IN) and lists the devices of the run: the CSV in comment lines above its header, the
Markdown in a table, the plot in its title. Text from the log (names, schedules, messages) is
written as data: control characters removed, Markdown's table bars escaped, and in the plot
mathtext's dollar signs escaped.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..text import clean
from .log import Event, LoggedPoint, RunRecord
from .result import RunResult, result_lines, run_result_or_reason

__all__ = ["CSV_COLUMNS", "Report", "device_lines", "export_csv", "report_paths", "write_report"]

CSV_COLUMNS = (
    "run",
    "index",
    "mount",
    "reading_deg",
    "counts",
    "reference",
    "leak",
    "leak_low",
    "leak_high",
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
    """What a report wrote: the Markdown file, the plot (None without matplotlib), a note when
    the plot is missing, and the run's result (None for a run without points or a recipe
    run)."""

    markdown: Path
    plot: Path | None
    note: str = ""
    result: RunResult | None = None

    def to_json(self) -> dict[str, Any]:
        """What was written, as JSON (``aligner log report --json``, docs/json.md): the note
        is ``plot_note`` (a note of the run log is an event)."""
        return {
            "markdown": str(self.markdown),
            "plot": None if self.plot is None else str(self.plot),
            "plot_note": self.note,
            "result": None if self.result is None else self.result.to_json(),
        }


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
            role, name = d.get("role"), d.get("name")
            who = name if role == name else f"{role} {name}"  # "counter", "mount analyzer"
            lines.append(
                clean(
                    f"{head}{who}: {d.get('kind')} ({d.get('spec')}, "
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


def _svg_text(text: object) -> str:
    """Log text for a plot: cleaned, mathtext's dollar signs escaped."""
    return clean(text).replace("$", r"\$")


def _limits(values: Sequence[float], pad: float = 0.12) -> tuple[float, float]:
    """A y range holding ``values`` (finite ones) with a margin."""
    finite = [v for v in values if math.isfinite(v)]
    lo, hi = (min(finite), max(finite)) if finite else (-1.0, 1.0)
    span = hi - lo or max(abs(hi), 1.0)
    return lo - pad * span, hi + pad * span


def _plot(record: RunRecord, result: RunResult, path: Path) -> None:
    """Pointer shift, amplification and leak rate against the imbalance (see the module)."""
    from matplotlib import rc_context
    from matplotlib.backends.backend_svg import FigureCanvasSVG
    from matplotlib.figure import Figure
    from matplotlib.ticker import LogFormatter, NullLocator

    c, pts = result.curve, result.points
    fig = Figure(figsize=(6.4, 8.6))
    FigureCanvasSVG(fig)
    shift_ax, amp_ax, leak_ax = fig.subplots(3, 1, sharex=True)
    import numpy as np

    measured = np.array(
        [
            (p.imbalance_deg, p.pointer, p.pointer_err, p.amplification, p.amplification_err)
            for p in pts
            if p.pointer is not None and p.pointer_err
        ],
        dtype=float,
    ).reshape(-1, 5)
    x = measured[:, 0]
    for ax, linear, exact, y, errors, label in (
        (
            shift_ax,
            c.linear_shift,
            c.exact_shift,
            measured[:, 1],
            measured[:, 2],
            f"pointer shift ({_svg_text(result.units)})",
        ),
        (
            amp_ax,
            c.amplification_linear,
            c.amplification_exact,
            measured[:, 3],
            measured[:, 4],
            "amplification",
        ),
    ):
        ax.plot(c.imbalance_deg, linear, "--", lw=1, color="0.45", label="linear prediction")
        ax.plot(c.imbalance_deg, exact, "-", lw=1.4, color="C0", label="exact prediction")
        if x.size:
            ax.errorbar(x, y, yerr=errors, fmt="o", ms=3.5, capsize=2, color="C3",
                        label="measured (1 s.e.)")  # fmt: skip
        ax.set_ylim(*_limits([*exact, *(y - errors), *(y + errors)]))
        ax.set_ylabel(label)
        ax.legend(fontsize="small", loc="upper right")
    amp_ax.set_title(_svg_text(f"measured shift / {result.amplification_basis}"), fontsize="small")
    counted = [p for p in pts if p.leak is not None]
    if counted:
        leak_ax.errorbar(
            [p.imbalance_deg for p in counted],
            [p.leak for p in counted],
            yerr=[
                [p.leak - (p.leak_low or 0.0) for p in counted],  # type: ignore[operator]
                [(p.leak_high or 0.0) - p.leak for p in counted],  # type: ignore[operator]
            ],
            fmt="o", ms=3.5, capsize=2, color="C3", label="measured (68 % interval)",
        )  # fmt: skip
    leak_ax.plot(c.imbalance_deg, c.leak, "-", lw=1.4, color="C0", label="predicted")
    leak_ax.set_yscale("log")
    # plain tick labels (1e-04) and no minor ticks: no mathtext, a fraction of the draw time
    leak_ax.yaxis.set_major_formatter(LogFormatter())
    leak_ax.yaxis.set_minor_locator(NullLocator())
    leak_ax.set_ylabel("leak rate (per source photon)")
    leak_ax.set_xlabel("imbalance (deg)")
    leak_ax.legend(fontsize="small", loc="lower right")
    fig.suptitle(
        _svg_text(f"run {record.id}: {record.schedule} ({record.data_label})"), fontsize="medium"
    )
    fig.subplots_adjust(left=0.14, right=0.97, top=0.94, bottom=0.06, hspace=0.22)
    with rc_context({"svg.fonttype": "none"}):  # text as text: smaller, faster, searchable
        fig.savefig(path, format="svg", metadata={"Date": None})


def _md(text: str) -> str:
    """Log text for a Markdown line: control characters removed, table bars escaped."""
    return clean(text).replace("|", "\\|").replace("\n", " ")


def _g(value: float | None, fmt: str = ".4g") -> str:
    return "-" if value is None or not math.isfinite(value) else format(value, fmt)


def _result_lines(result: RunResult) -> list[str]:
    """The result section: the lines of :func:`aligner.run.result.result_lines` and the
    errors on ``g`` of the run against the standard measurement."""
    first, *rest = result_lines(result)
    lines = ["## Result", "", _md(f"**{first}**"), "", *(_md(f"- {line}") for line in rest)]
    b = result.benefit
    if b is not None:
        lines += [
            "",
            f"| error on g ({_md(result.coupling.units if result.coupling else '')}) | value |",
            "|---|---|",
            f"| this run (fit) | {_g(b.run_error)} |",
            f"| this design, predicted (exact post-selected spread, jitter) | "
            f"{_g(b.predicted_error)} |",
            f"| standard measurement, same photons and jitter | {_g(b.standard_error)} |",
            f"| standard measurement, same photons, no jitter | {_g(b.standard_shot_error)} |",
            f"| standard measurement attenuated to the detector's safe rate | "
            f"{_g(b.standard_safe_error)} |",
            f"| Cramer-Rao bound, post-selected events | {_g(b.cramer_rao_post)} |",
            f"| Cramer-Rao bound, standard measurement | {_g(b.cramer_rao_standard)} |",
        ]
    return [*lines, ""]


def _point_lines(result: RunResult, points: Sequence[LoggedPoint]) -> list[str]:
    """The points table: pointer against its predictions, amplification, counts and leak."""
    u = _md(result.units)
    lines = [
        f"| # | reading (deg) | imbalance (deg) | pointer ({u}) | linear | exact "
        "| (meas. - exact)/s.e. | amplification | linear | exact | counts | leak "
        "| 68 % interval | predicted | measured/predicted |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r, p in zip(result.points, points, strict=True):
        pointer = "-" if r.pointer is None else f"{r.pointer:.4g} +/- {_g(r.pointer_err, '.2g')}"
        amp = "-" if r.amplification is None else (
            f"{r.amplification:.4g} +/- {_g(r.amplification_err, '.2g')}"
        )  # fmt: skip
        if r.leak is None:
            leak, interval, ratio = "-", _md(r.flag), "-"
        else:
            leak = f"{r.leak:.3e}"
            interval = f"{_g(r.leak_low, '.3e')} - {_g(r.leak_high, '.3e')}"
            ratio = f"{r.leak / r.predicted_leak:.3g}" if r.predicted_leak > 0 else "-"
        lines.append(
            f"| {r.idx} | {r.reading_deg:.4f} | {r.imbalance_deg:+.3f} | {pointer} | "
            f"{r.linear_shift:.4g} | {r.exact_shift:.4g} | {_g(r.residual_sigma, '+.2f')} | "
            f"{amp} | {r.amplification_linear:.4g} | {r.amplification_exact:.4g} | "
            f"{p.counts} | {leak} | {interval} | {r.predicted_leak:.3e} | {ratio} |"
        )
    return [*lines, ""]


def _markdown(
    record: RunRecord,
    points: Sequence[LoggedPoint],
    events: Sequence[Event],
    result: RunResult | None,
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
        _md(f"- bench file: {record.bench_path} (snapshot kept in the run log; used here)"),
        f"- started {record.started_utc}, ended {record.ended_utc or '-'} (UTC)",
        f"- software: aligner {record.software_version}",
        f"- data: {record.data_label}",
        "",
    ]
    if result is not None:
        lines += _result_lines(result)
    if plot is not None:
        lines += [f"![pointer shift, amplification and leak rate]({plot.name})", ""]
    elif note:
        lines += [f"_No plot: {note}._", ""]
    if result is not None:
        lines += ["## Points", "", *_point_lines(result, points)]
    lines += ["## Devices", "", *(_md(f"- {line}") for line in device_lines(record)), ""]
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


def report_paths(run_id: int, out_dir: str | Path) -> tuple[Path, Path]:
    """The Markdown file and the plot a report of run ``run_id`` writes into ``out_dir``."""
    out = Path(out_dir)
    return out / f"run-{run_id}.md", out / f"run-{run_id}.svg"


def write_report(
    record: RunRecord,
    points: Sequence[LoggedPoint],
    events: Sequence[Event],
    out_dir: str | Path,
    *,
    overwrite: bool = False,
) -> Report:
    """Write ``run-<id>.md`` and ``run-<id>.svg`` into ``out_dir`` (created); a report already
    there is kept unless ``overwrite``."""
    markdown, plot_path = report_paths(record.id, out_dir)
    there = [p for p in (markdown, plot_path) if p.exists()]
    if there and not overwrite:
        raise InputError(
            f"--out {out_dir}: {there[0].name} exists; choose another folder or add --force "
            "to replace the report"
        )
    try:
        markdown.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"--out {out_dir}: cannot create the folder ({exc})") from None
    result, note = run_result_or_reason(record, points)
    plot: Path | None = plot_path
    if result is None:
        plot = None
    else:
        try:
            _plot(record, result, plot_path)
        except ImportError:
            plot, note = None, INSTALL_HINT
    try:
        markdown.write_text(_markdown(record, points, events, result, plot, note), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"--out {out_dir}: {markdown.name} cannot be written ({exc})") from None
    return Report(markdown, plot, note, result)
