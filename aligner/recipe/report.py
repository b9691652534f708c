"""A logged recipe run, step by step: plain lines for ``aligner log show`` and a Markdown
report for ``aligner log report``. Text from the log (recipe texts, messages) is data: control
characters are removed, and Markdown's table bars escaped."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from ..errors import InputError
from ..run.log import Event, RecipeRunRow, RecipeStepRow, RunRecord
from ..run.report import Report, device_lines
from ..text import clean
from .results import StepOutcome, fmt_quantity

__all__ = ["step_lines", "write_recipe_report"]


def _details(o: StepOutcome) -> list[str]:
    """The quantities, readings, answer, devices and times of one step, one per line."""
    lines = [f"{name} = {fmt_quantity(q)}" for name, q in o.quantities.items()]
    if o.readings:
        lines.append("readings: " + ", ".join(f"{k} {v:.4f} deg" for k, v in o.readings.items()))
    if o.answer:
        lines.append(f"operator answered: {o.answer}")
    if o.devices:
        lines.append(f"devices: {', '.join(o.devices)}")
    if o.run is not None:
        lines.append(f"run: {o.run}")
    lines.append(f"{o.started_utc[:19]} - {o.ended_utc[11:19]} UTC")
    return [clean(line) for line in lines]


def step_lines(steps: Sequence[RecipeStepRow]) -> list[str]:
    """One line per logged step (its state in words), then its details indented."""
    lines = []
    for row in steps:
        o = StepOutcome.from_json(row.outcome)
        lines.append(clean(f"step {o.number} ({o.do}) {o.state.upper()}: {o.message}"))
        lines += [f"    {line}" for line in _details(o)]
    return lines


def _md(text: str) -> str:
    return clean(text).replace("|", "\\|").replace("\n", " ")


def write_recipe_report(
    record: RunRecord,
    recipe: RecipeRunRow,
    steps: Sequence[RecipeStepRow],
    events: Sequence[Event],
    out_dir: str | Path,
) -> Report:
    """Write ``run-<id>.md`` (the recipe run step by step) into ``out_dir`` (created)."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create the folder ({exc})") from None
    lines = [
        _md(f"# Run {record.id}: recipe {recipe.name} ({record.data_label})"),
        "",
        _md(
            f"- status: {record.status}, {len(steps)} of {recipe.steps} steps logged"
            + (f" -- {record.message}" if record.message else "")
        ),
        _md(f"- recipe file: {recipe.path} (its text is kept in the run log)"),
        _md(f"- bench: {record.bench_name}, file {record.bench_path} (snapshot in the run log)"),
        f"- started {record.started_utc}, ended {record.ended_utc or '-'} (UTC)",
        f"- software: aligner {record.software_version}",
        "",
        "## Devices",
        "",
        *(_md(f"- {line}") for line in device_lines(record)),
        "",
        "## Steps",
        "",
        "| # | step | state | result |",
        "|---|---|---|---|",
    ]
    details: list[str] = []
    for row in steps:
        o = StepOutcome.from_json(row.outcome)
        lines.append(f"| {o.number} | {o.do} | {o.state.upper()} | {_md(o.message)} |")
        details += [f"### Step {o.number} ({o.do})", ""]
        details += [_md(f"- {line}") for line in _details(o)] + [""]
    lines += ["", *details]
    if events:
        lines += ["## Events", ""]
        lines += [_md(f"- {e.t_utc} {e.kind}: {e.message}") for e in events] + [""]
    lines += [
        "Laser safety: follow your local laser-safety rules and your laser safety officer.",
        "",
    ]
    markdown = out / f"run-{record.id}.md"
    markdown.write_text("\n".join(lines), encoding="utf-8")
    return Report(markdown, None, "a recipe run has no plot; its sweeps have their own runs")
