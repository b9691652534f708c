"""Recipe screen: pick a bundled or local recipe, run it in a worker, answer its questions in
place, pause and resume it; every step's state and result in words.

Cautions, questions and results are shown whole: they wrap, and the area that holds them
scrolls (Tab to it, then the arrows or page keys) when they are longer than the space. The
question stands last, just above a line that says how to answer and the answer box."""

from __future__ import annotations

import queue
from typing import Any, ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Horizontal, Vertical
from textual.widgets import Input, OptionList, Static

from ...errors import AlignerError
from ...recipe import Entry, Operator, OperatorPause, Recipe, Step, StepOutcome, parse_answer
from ...run.station import shutter_words
from ...text import clean, safe_text
from .. import keys
from ..messages import RecipeAsks, RecipeEnded, RecipeSaid, RecipeStepState
from ..widgets.recipe_steps import RecipeSteps
from ..widgets.scroll_area import ScrollArea
from .base import DeskScreen

__all__ = ["DeskOperator", "RecipeScreen"]

IDLE = "pick a recipe; Ctrl+S starts it, Ctrl+P pauses it, Ctrl+G goes on with a paused run"
#: How to answer, by what the recipe waits for ("" when no question is open).
HOW_TO_ANSWER = {
    "": "no question open: when a step asks one, answer it in this box",
    "confirm": "ANSWER BELOW: type yes or no, then Enter",
    "prompt": "ANSWER BELOW: type the value asked for above (or stop), then Enter",
}
#: Lines the recipe said that the screen keeps (the oldest go first).
KEPT_LINES = 200
#: What the answer box stands for while the recipe waits for nothing.
_PAUSE = object()


class DeskOperator(Operator):
    """The operator at the desk: lines and questions go to the screen as messages; the worker
    thread waits for the answer typed in the screen's answer box."""

    def __init__(self, screen: RecipeScreen) -> None:
        self.screen = screen
        self.answers: queue.Queue[Any] = queue.Queue()

    def say(self, text: str) -> None:
        self.screen.post_message(RecipeSaid(text))

    def _wait(self, kind: str, text: str) -> Any:
        self.screen.post_message(RecipeAsks(kind, text))
        answer = self.answers.get()
        if answer is _PAUSE:
            raise OperatorPause("paused while a question was open")
        return answer

    def confirm(self, text: str) -> bool:
        return bool(self._wait("confirm", text))

    def ask(self, step: Step) -> float | None:
        a = step.args
        text = f"{a['text']} ({a['unit']}, {a['min']:g} to {a['max']:g})"
        answer = self._wait("prompt", text)
        return None if answer is None else float(answer)

    def step_started(self, step: Step) -> None:
        self.screen.post_message(RecipeStepState(step.number, "running"))

    def step_ended(self, outcome: StepOutcome) -> None:
        self.screen.post_message(RecipeStepState(outcome.number, outcome.state, outcome.message))


class RecipeScreen(DeskScreen):
    """Run written recipes on the desk's bench (engine: :mod:`aligner.recipe`)."""

    MODE = "recipe"
    BINDINGS: ClassVar[list[BindingType]] = [
        keys.on_screen(keys.START, "start the chosen recipe from its first step"),
        keys.on_screen(
            keys.PAUSE,
            "pause the recipe at its next safe point (shutter shut, the run resumable)",
        ),
        keys.on_screen(keys.GO_ON, "go on with the paused recipe run where it stopped"),
    ]
    HELP_KEYS: ClassVar = (
        ("↑ / ↓", "pick a recipe in the list (Tab to the list first; not while one runs)"),
        (
            "type, then Enter",
            "answer the open question in the answer box: yes or no for a confirmation, the "
            "value (or stop) for a reading",
        ),
    )

    def __init__(self) -> None:
        super().__init__()
        self.entries: list[Entry] = []
        self.chosen: Recipe | None = None
        self.running = False
        self.states: dict[int, str] = {}
        self.asking: str = ""
        self.paused_run: int | None = None
        self.operator: DeskOperator | None = None
        self.lines: list[str] = []

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="recipe-body"):
            yield OptionList(id="recipe-list")
            with Vertical(id="recipe-right"):
                yield RecipeSteps(id="recipe-steps")
                with ScrollArea(id="recipe-dialogue") as dialogue:
                    dialogue.border_title = "Cautions, questions, results"
                    yield Static("", id="recipe-lines")
                    yield Static("", id="recipe-current")
                yield Static(HOW_TO_ANSWER[""], id="recipe-hint")
                yield Input(id="recipe-answer", placeholder="yes, no or a value when asked")
        yield Static(IDLE, id="recipe-status")

    def on_mount(self) -> None:
        self.entries = self.backend.recipes()
        options = self.query_one("#recipe-list", OptionList)
        for e in self.entries:
            label = e.recipe.title if e.recipe else f"{e.name}: DOES NOT LOAD"
            options.add_option(Text(f"{clean(label)} ({e.origin})"))
        self.query_one("#recipe-answer", Input).disabled = True
        if self.entries:
            options.highlighted = 0
            self.pick(0)

    @on(OptionList.OptionHighlighted)
    def highlighted(self, event: OptionList.OptionHighlighted) -> None:
        if not self.running:
            self.pick(event.option_index)

    def pick(self, index: int) -> None:
        entry = self.entries[index]
        self.chosen = entry.recipe
        self.states = {}
        if entry.recipe is None:
            self.query_one(RecipeSteps).update("")
            self.status(f"{entry.name} does not load: {safe_text(entry.error)}", error=True)
            return
        r = entry.recipe
        self.query_one(RecipeSteps).show(r.steps, self.states)
        self.current(f"{r.title} (about {r.duration_min:g} min)\n{r.purpose}")
        self.status(IDLE)

    # -- actions -------------------------------------------------------------------------------

    def action_start(self) -> None:
        if self.running:
            self.status("a recipe is running; Ctrl+P pauses it first", error=True)
            return
        if self.chosen is None:
            self.status("no recipe chosen (or it does not load)", error=True)
            return
        self.begin(None)

    def action_pause(self) -> None:
        if not self.running:
            self.status("no recipe is running", error=True)
            return
        self.backend.request_stop()
        if self.operator is not None and self.asking:
            self.operator.answers.put(_PAUSE)
        self.status("pausing at the next safe point…")

    def action_go_on(self) -> None:
        if self.running:
            return
        if self.paused_run is None:
            self.status(
                "nothing to resume here (resume older runs with 'aligner recipe run NAME "
                "BENCH --resume RUN')",
                error=True,
            )
            return
        self.begin(self.paused_run)

    def begin(self, resume_run: int | None) -> None:
        self.running = True
        self.lines = []
        if resume_run is None:
            self.states = {}
        self.operator = DeskOperator(self)
        self.status("resuming the recipe run…" if resume_run else "starting the recipe…")
        self.recipe_worker(self.chosen, self.operator, dict(self.desk.readings), resume_run)

    @work(thread=True, exclusive=True, group="recipe")
    def recipe_worker(
        self,
        recipe: Recipe | None,
        operator: DeskOperator,
        readings: dict[str, float],
        resume: int | None,
    ) -> None:
        try:
            result = self.backend.run_recipe(recipe, operator, readings, resume_run=resume)
        except AlignerError as exc:
            self.post_message(RecipeEnded(error=str(exc)))
            return
        self.post_message(RecipeEnded(result=result))

    @on(Input.Submitted, "#recipe-answer")
    def answered(self, event: Input.Submitted) -> None:
        if not self.asking or self.operator is None:
            return
        text = event.value.strip()
        if self.asking == "confirm":
            if text.lower() not in ("y", "yes", "n", "no"):
                self.status("type yes or no, then Enter", error=True)
                return
            answer: Any = text.lower() in ("y", "yes")
        else:
            if text.lower() == "stop":
                answer = None
            else:
                steps = self.chosen.steps if self.chosen else ()
                running = [s for s in steps if self.states.get(s.number) == "running"]
                if not running:
                    self.status("no step of the chosen recipe is waiting for a value", error=True)
                    return
                answer = parse_answer(running[0], text)
                if isinstance(answer, str):
                    self.status(safe_text(answer), error=True)
                    return
        box = self.query_one("#recipe-answer", Input)
        box.value, box.disabled = "", True
        self.hint("")
        self.operator.answers.put(answer)
        self.status("running…")

    # -- messages from the worker ------------------------------------------------------------

    @on(RecipeSaid)
    def said(self, event: RecipeSaid) -> None:
        self.lines = [*self.lines, clean(event.text)][-KEPT_LINES:]
        text = Text("\n").join(
            Text(line, style="bold #ffd166" if line.startswith("caution") else "")
            for line in self.lines
        )
        self.query_one("#recipe-lines", Static).update(text)
        self.show_latest()

    @on(RecipeStepState)
    def step_state(self, event: RecipeStepState) -> None:
        self.states[event.number] = event.state
        if self.chosen is None:
            return
        steps = self.chosen.steps
        self.query_one(RecipeSteps).show(steps, self.states)
        step = steps[event.number - 1]
        head = f"step {event.number} of {len(steps)}: {step.label()}"
        body = str(step.args.get("text", "")) if event.state == "running" else event.message
        self.current(f"{head}\n{body}")

    @on(RecipeAsks)
    def asks(self, event: RecipeAsks) -> None:
        self.current(f"QUESTION: {event.text}", style="bold")
        self.hint(event.kind)
        box = self.query_one("#recipe-answer", Input)
        box.disabled = False
        box.focus()
        self.status("waiting for your answer")

    @on(RecipeEnded)
    def ended(self, event: RecipeEnded) -> None:
        self.running = False
        self.hint("")
        self.query_one("#recipe-answer", Input).disabled = True
        if event.error:
            self.status(f"not started: {safe_text(event.error)}", error=True)
            return
        r = event.result
        if r is None:
            return
        if r.status == "complete":
            failed = f"; checks FAILED at steps {', '.join(map(str, r.failed))}" if r.failed else ""
            self.status(
                f"recipe run {r.run_id} COMPLETE: {r.steps_done} of {r.steps_total} steps"
                f"{failed}; {shutter_words(r.shutter)}",
                error=bool(r.failed),
            )
            self.paused_run = None
            return
        self.paused_run = r.run_id
        self.status(
            f"recipe run {r.run_id} STOPPED ({r.reason}): {safe_text(r.message)}. Ctrl+G goes on "
            "where it stopped.",
            error=r.reason not in ("operator",),
        )

    # -- helpers -------------------------------------------------------------------------------

    def current(self, text: str, style: str = "") -> None:
        """Show the current step, question or recipe (as written, wrapped) and bring its start
        into view."""
        self.query_one("#recipe-current", Static).update(Text(clean(text), style=style))
        self.show_latest()

    def show_latest(self) -> None:
        """Once laid out, scroll the dialogue so that the current text starts in view (the lines
        before it stay a scroll away)."""
        dialogue = self.query_one("#recipe-dialogue", ScrollArea)
        current = self.query_one("#recipe-current", Static)
        self.call_after_refresh(dialogue.scroll_to_widget, current, animate=False, top=True)

    def hint(self, kind: str) -> None:
        """Say beside the answer box how to answer a question of ``kind`` ("" for none)."""
        self.asking = kind
        line = self.query_one("#recipe-hint", Static)
        line.update(HOW_TO_ANSWER[kind])
        line.set_class(bool(kind), "-asking")

    def status(self, text: str, *, error: bool = False) -> None:
        line = self.query_one("#recipe-status", Static)
        line.update(text)
        line.set_class(error, "problem")
