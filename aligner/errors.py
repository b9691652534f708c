"""The project's one error tree.

Every error a user can cause or meet carries a plain one-sentence message that says what is
wrong and what to do; the CLI prints it to stderr and exits with ``exit_code``.

::

    AlignerError                    (exit 2)
    ├── InputError                  bad input: an argument, a bench file, a recipe, a data file
    │   ├── BenchFileError          names the file and the key (with its table)
    │   ├── RecipeError
    │   ├── DataFileError           CSV and run-log input
    │   └── ParameterError          an engine function's argument (the CLI names its option)
    ├── InfeasibleTarget            a planner target the bench cannot reach (says the limit)
    ├── StorageError                (exit 3) the run log could not be written (full disk ...)
    └── DeviceError                 (exit 3) raised only by drivers/, converted at the boundary
        ├── DeviceTimeout
        ├── BadReply
        │   └── Unattributable  a reply that cannot be told to belong to its command
        ├── DeviceRefused           the controller answered with an error reply
        ├── Disconnected
        ├── ReadbackMismatch        a mount read back other than it was sent to
        └── GuardTrip               the detector guard stopped a move or a count

    KeyboardInterrupt
    ├── SignalInterrupt             SIGTERM or SIGHUP, handled like Ctrl-C (exit 128 + signal)
    └── StopRequested               a stop asked for (the desk's pause or quit) cuts a count short

Drivers convert pyserial and OS errors into ``DeviceError`` subclasses; nothing above the
driver layer catches ``serial.SerialException`` or ``OSError`` from a device.

Exit status of every command (:data:`EXIT_STATUS`): 0 success; 1 an internal error (a bug:
please report it); 2 bad input or an infeasible request; 3 a device fault, a detector-guard
stop or a run log that cannot be written; 130 Ctrl-C; 128 + N another signal N (SIGTERM 143,
SIGHUP 129; a closed output pipe 141). A run that stops for any reason has its shutter
shut and can be resumed.
"""

from __future__ import annotations

__all__ = [
    "ENDING_STATUS",
    "EXIT_STATUS",
    "AlignerError",
    "BadReply",
    "BenchFileError",
    "DataFileError",
    "DeviceError",
    "DeviceRefused",
    "DeviceTimeout",
    "Disconnected",
    "GuardTrip",
    "InfeasibleTarget",
    "InputError",
    "OutputClosed",
    "ParameterError",
    "ReadbackMismatch",
    "RecipeError",
    "SignalInterrupt",
    "StopRequested",
    "StorageError",
    "Unattributable",
    "exit_status",
    "outside_range",
]

#: Exit status of every command, by meaning (the README's table is generated from the same).
EXIT_STATUS = {
    0: "success",
    1: "internal error (a bug; please report it with the output of --debug)",
    2: "bad input, or a request the bench cannot meet",
    3: "device fault, detector-guard stop or run log not writable (the run is resumable)",
    130: "Ctrl-C (the run is resumable)",
    143: "SIGTERM; 129 SIGHUP; 141 a closed output pipe (the run is resumable)",
}


#: Why a run (a sweep, a recipe) ended -> the exit status of the command that ran it:
#: ``""`` done, ``operator`` a pause asked for, ``refused`` a confirmation the operator refused,
#: ``check`` a recipe check that stops, ``input`` bad input found while running, ``guard`` /
#: ``device`` / ``storage`` a guard trip, a device fault, a run log that cannot be written,
#: ``error`` an internal error; ``interrupt`` (Ctrl-C or a signal) is 128 + the signal.
ENDING_STATUS = {
    "": 0,
    "operator": 0,
    "refused": 2,
    "check": 2,
    "input": 2,
    "guard": 3,
    "device": 3,
    "storage": 3,
    "error": 1,
}


def exit_status(reason: str, signal: int = 0) -> int:
    """The exit status of a run that ended for ``reason`` (:data:`ENDING_STATUS`); a run
    stopped by a signal exits with 128 + the signal (Ctrl-C: 130)."""
    if reason == "interrupt":
        return 128 + (signal or 2)
    return ENDING_STATUS[reason]


def outside_range(shown: str, low: float, high: float, *, integer: bool = False) -> str:
    """The words for a value (``shown`` as given) outside ``[low, high]``: one wording for a
    command's option and the desk's field alike (each puts its own name before it)."""

    return f"{shown} is outside the allowed range ({allowed_range(low, high, integer=integer)})"


def allowed_range(low: float, high: float, *, integer: bool = False) -> str:
    """``from LOW to HIGH`` in words; ``LOW or more`` for whole numbers up to the 64-bit limit
    (run ids, seeds), whose upper end says nothing to a reader."""

    def bound(x: float) -> str:
        return str(int(x)) if integer else f"{x:g}"

    if integer and high >= 2**63 - 1:
        return f"{bound(low)} or more"
    return f"from {bound(low)} to {bound(high)}"


class AlignerError(Exception):
    """Base of every error the tool raises on purpose."""

    exit_code = 2


class InputError(AlignerError):
    """Bad input from the user: an argument, a file, a value out of range."""


class BenchFileError(InputError):
    """A bench file that cannot be read or does not validate.

    ``path`` is the file, ``key`` the dotted key (``mounts.analyzer.sense``, ``pre[1].type``).
    """

    def __init__(self, path: str, key: str | None, problem: str) -> None:
        self.path = path
        self.key = key
        self.problem = problem
        where = f"{path}: {key}" if key else str(path)
        super().__init__(f"{where}: {problem}")


class RecipeError(InputError):
    """A recipe file that cannot be read, does not validate, or a step that cannot run."""


class DataFileError(InputError):
    """A data file (CSV, run log) that is empty, short, malformed or out of range."""


class ParameterError(InputError):
    """An argument of an engine function that is out of range. ``parameter`` is the
    function's own name for it and ``problem`` what is wrong; a command that took the value
    from an option names the option instead (``--dwell`` for ``dwell_s``)."""

    def __init__(self, parameter: str, problem: str) -> None:
        self.parameter = parameter
        self.problem = problem
        super().__init__(f"{parameter} {problem}")


class InfeasibleTarget(AlignerError):
    """A planner target beyond what the bench can reach.

    ``limit`` names the limiting mechanism, ``achievable`` the best value the bench reaches.
    """

    def __init__(self, message: str, limit: str, achievable: float | None = None) -> None:
        self.limit = limit
        self.achievable = achievable
        super().__init__(message)


class DeviceError(AlignerError):
    """A device fault: the hardware (or its emulator) did not do what was asked."""

    exit_code = 3


class DeviceTimeout(DeviceError):
    """A device did not answer within its timeout."""


class BadReply(DeviceError):
    """A device answered with something that does not match the profile's reply pattern."""


class Unattributable(BadReply):
    """A reply that cannot be attributed to its command (two replies to one command, a gate
    that did not start): a fault, never a data point."""


class DeviceRefused(DeviceError):
    """A device answered with an error reply."""


class Disconnected(DeviceError):
    """The port vanished or could not be opened."""


class ReadbackMismatch(DeviceError):
    """A mount read back a position other than the one it was sent to (beyond its stated
    tolerance): wrong steps per degree, number format or sense in its profile, or a stall."""


class GuardTrip(DeviceError):
    """The detector guard refused a move or stopped a count to protect the detector."""


class StorageError(AlignerError):
    """The run log could not be written (a full disk, a removed or read-only file)."""

    exit_code = 3


class SignalInterrupt(KeyboardInterrupt):
    """SIGTERM or SIGHUP arrived: stop as for Ctrl-C. ``signum`` is the signal number."""

    def __init__(self, signum: int) -> None:
        self.signum = signum
        super().__init__(f"signal {signum}")

    @property
    def cause(self) -> str:
        """What stopped the command, in words."""
        return f"signal {self.signum}"

    @property
    def exit_code(self) -> int:
        """128 + the signal number (the shell's convention)."""
        return 128 + self.signum


class OutputClosed(SignalInterrupt):
    """The reader of the command's output went away (``aligner sweep ... | head``): stop as
    for SIGPIPE (exit status 141), the shutter shut and the run resumable."""

    def __init__(self) -> None:
        super().__init__(13)  # SIGPIPE on every POSIX system

    @property
    def cause(self) -> str:
        return "a closed output pipe"


class StopRequested(KeyboardInterrupt):
    """The operator asked the running operation to stop (the desk's pause or quit,
    :meth:`aligner.run.station.Station.request_stop`): raised between two gates of a count, it
    unwinds like Ctrl-C to the run, which pauses with reason ``operator``."""
