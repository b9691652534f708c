"""Manual counter and pointer with injected operator answers."""

from __future__ import annotations

import pytest

from aligner.errors import Disconnected, InputError
from aligner_drivers.manual import ManualCounter, ManualPointer


class Operator:
    """Answers prompts from a list and records what was shown."""

    def __init__(self, *answers: str) -> None:
        self.answers = list(answers)
        self.prompts: list[str] = []
        self.notes: list[str] = []

    def ask(self, prompt: str) -> str:
        self.prompts.append(prompt)
        if not self.answers:
            raise EOFError
        return self.answers.pop(0)


def make_counter(op: Operator, channels: int = 2) -> ManualCounter:
    return ManualCounter(channels, input_fn=op.ask, output_fn=op.notes.append)


def test_counter_asks_each_channel_once():
    op = Operator("1200", " 340 ")
    assert make_counter(op).count(2.0) == (1200, 340)
    assert op.prompts == ["post-selected counts in 2 s: ", "reference counts in 2 s: "]
    assert "laser-safety" in op.notes[0]


def test_counter_asks_again_on_bad_input_and_says_why():
    op = Operator("lots", "-3", "12.5", "1,250", "7")
    assert make_counter(op).count(1.0) == (1250, 7)
    reasks = [n for n in op.notes if "type it again" in n]
    assert len(reasks) == 3
    assert "'lots' is not a whole count >= 0" in reasks[0]


def test_cancel_and_end_of_input():
    with pytest.raises(InputError, match="cancelled by the operator"):
        make_counter(Operator("q")).count(1.0)
    with pytest.raises(Disconnected, match="no operator input"):
        make_counter(Operator()).count(1.0)


def test_counter_checks_arguments():
    with pytest.raises(InputError, match="channels"):
        ManualCounter(3)
    with pytest.raises(InputError, match="dwell_s"):
        make_counter(Operator("1")).count(-1.0)


def test_pointer_reads_mean_then_error():
    op = Operator("0.0123", "nan", "-1", "0.0004")
    pointer = ManualPointer(input_fn=op.ask, output_fn=op.notes.append)
    assert pointer.read(5.0) == (0.0123, 0.0004)
    assert op.prompts[0] == "mean pointer reading over 5 s: "
    assert sum("type it again" in n for n in op.notes) == 2
