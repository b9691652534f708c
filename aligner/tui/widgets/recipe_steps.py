"""A recipe's steps with their state in words (colour only repeats the word)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

from rich.text import Text
from textual.widgets import Static

from ...text import clean

if TYPE_CHECKING:
    from ...recipe import Step

__all__ = ["RecipeSteps"]

#: state -> (word shown, style)
_STATE = {
    "": ("waiting", "dim"),
    "running": ("RUNNING", "bold yellow"),
    "done": ("done", "green"),
    "passed": ("PASSED", "bold green"),
    "failed": ("FAILED", "bold red"),
    "skipped": ("skipped", "dim"),
    "refused": ("REFUSED", "bold red"),
    "stopped": ("STOPPED", "bold red"),
}


class RecipeSteps(Static):
    """Every step of a recipe: number, kind, state word and title (or the start of its
    text); recipe texts are shown as written (control characters removed, no markup)."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__("", **kwargs)
        self.border_title = "Steps"

    def show(self, steps: Sequence[Step], states: Mapping[int, str]) -> None:
        """Show ``steps`` (:class:`aligner.recipe.Step`) with ``states`` by step number,
        from two steps before the latest one that has a state (a small screen shows the
        current step)."""
        text = Text(no_wrap=True, overflow="ellipsis")
        latest = max((i for i, s in enumerate(steps) if states.get(s.number)), default=0)
        first = max(0, latest - 2)
        if first:
            text.append(f"  ({first} earlier steps above)\n", style="dim")
        for step in steps[first:]:
            word, style = _STATE.get(states.get(step.number, ""), ("?", ""))
            label = step.title or str(step.args.get("text", ""))[:48]
            text.append(f"{step.number:>3}. {step.do:<8} ")
            text.append(f"{word:<8}", style=style)
            text.append(f" {clean(label)}\n")
        self.update(text)
